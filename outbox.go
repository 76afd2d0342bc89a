package halfmark

import (
	"context"
	"time"
)

// The delivery channels of a notification.
const (
	ChannelEmail   = "email"
	ChannelWebhook = "webhook"
)

// OutboxRow is one notification in the outbox, as written by the
// evaluation (or the daily digest) and read by the deliverer.
type OutboxRow struct {
	ID         int64
	Channel    string // ChannelEmail or ChannelWebhook
	Level      Level
	FindingID  int64  // 0 for a digest
	DigestDay  string // "2006-01-02" for a digest, else ""
	DedupeKey  string // stable across retries: the e-mail's Message-ID and the webhook's delivery key derive from it
	Subject    string
	Body       string   // e-mail text
	Payload    []byte   // webhook JSON object
	Recipients []string // e-mail addresses

	Attempts      int        // sends tried so far
	NextAttemptAt time.Time  // not tried before this time
	DeliveredAt   *time.Time // nil until a send succeeded and was recorded
	LastError     string     // the last failed send's error ("" after a success)
}

// OutboxDue selects the rows a deliverer may claim: not delivered, due by
// Now, fewer than MaxAttempts attempts, and neither in SkipIDs nor on a
// channel in SkipChannels.
type OutboxDue struct {
	Now          time.Time
	MaxAttempts  int
	SkipIDs      []int64
	SkipChannels []string
}

// OutboxClaim is one outbox row locked for delivery. While it is held no
// other deliverer can claim the row. Exactly one of Delivered or Failed
// records the outcome and releases the row; Release gives it back
// unchanged (a no-op after Delivered or Failed), so callers defer it.
type OutboxClaim interface {
	// Row is the claimed row as it was when claimed.
	Row() OutboxRow
	// Delivered records a successful send at at (attempts + 1, no error)
	// and commits. An error means the outcome may not be recorded: the row
	// can be sent again (delivery is at-least-once).
	Delivered(ctx context.Context, at time.Time) error
	// Failed records a failed send (attempts + 1, the error text, no
	// attempt before next) and commits.
	Failed(ctx context.Context, next time.Time, lastError string) error
	// Release gives the row back without recording anything.
	Release(ctx context.Context)
}

// OutboxStore is what the notification deliverer needs of the store.
type OutboxStore interface {
	// ClaimOutbox locks the most urgent due row (highest level, then
	// earliest due, then oldest) that no other deliverer holds. ok is false
	// when no row is due or every due row is held. Errors are EUnavailable
	// when the database cannot be reached.
	ClaimOutbox(ctx context.Context, due OutboxDue) (c OutboxClaim, ok bool, err error)
}

// DigestStore is what the daily digest job needs of the store.
type DigestStore interface {
	// DigestFindings lists the Level 1 findings active now and opened
	// before before, by machine and age.
	DigestFindings(ctx context.Context, before time.Time) ([]Finding, error)
	// EnqueueNotifications writes notifications into the outbox in one
	// transaction; a dedupe key already there adds nothing.
	EnqueueNotifications(ctx context.Context, ns []Notification) error
}
