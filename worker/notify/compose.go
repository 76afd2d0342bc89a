package notify

import (
	"encoding/json"
	"strconv"
	"time"

	"halfmark"
)

// The delivery channels of a notification.
const (
	ChannelEmail   = halfmark.ChannelEmail
	ChannelWebhook = halfmark.ChannelWebhook
)

// FindingDedupeKey is the outbox key of one finding's notification at one
// level on one channel: "finding:42:level:3:email". A finding that
// escalates from Level 2 to Level 3 is notified again; a repeat at the same
// level is not.
func FindingDedupeKey(findingID int64, level halfmark.Level, channel string) string {
	return "finding:" + strconv.FormatInt(findingID, 10) + ":level:" + strconv.Itoa(int(level)) + ":" + channel
}

// DigestDedupeKey is the outbox key of the daily digest of day
// ("2026-12-02") on one channel: "digest:2026-12-02:email".
func DigestDedupeKey(day, channel string) string { return "digest:" + day + ":" + channel }

// FindingEvent is the stored webhook payload of a finding; the deliverer
// adds "sent_at" when it posts it.
type FindingEvent struct {
	Event   string           `json:"event"` // "finding"
	Finding halfmark.Finding `json:"finding"`
}

// DigestEvent is the stored webhook payload of a daily digest.
type DigestEvent struct {
	Event    string             `json:"event"` // "digest"
	Day      string             `json:"day"`   // "2006-01-02" in the digest's time zone
	Level    halfmark.Level     `json:"level"` // always 1
	Findings []halfmark.Finding `json:"findings"`
}

// Composer writes the notifications of findings from the configuration.
// It does no I/O: the store writes what it returns into the outbox in the
// same transaction as the finding, so a notification exists if and only if
// the finding change commits.
type Composer struct {
	cfg Config
}

// NewComposer returns a composer for cfg (recipients, channels, dashboard
// URL and time zone are read from it).
func NewComposer(cfg Config) *Composer { return &Composer{cfg: cfg} }

var _ halfmark.FindingNotifier = (*Composer)(nil)

// FindingNotifications implements halfmark.FindingNotifier. For a stored
// (ID > 0) Level 2 or Level 3 finding it returns one e-mail, when an SMTP
// host and recipients for the finding's level are configured, and one
// webhook, when a webhook URL is configured, each keyed
// FindingDedupeKey(id, level, channel). Level 1 findings go to the daily
// digest instead (DigestNotifications); other levels and unstored findings
// give nothing.
func (c *Composer) FindingNotifications(f halfmark.Finding) []halfmark.Notification {
	if f.ID <= 0 || f.Level < halfmark.LevelScheduled || f.Level > halfmark.LevelImmediate {
		return nil
	}
	var out []halfmark.Notification
	subject := findingSubject(f)
	if recips := c.cfg.Recipients[f.Level]; c.cfg.emailEnabled() && len(recips) > 0 {
		out = append(out, halfmark.Notification{
			Channel: ChannelEmail, Level: f.Level, FindingID: f.ID,
			DedupeKey:  FindingDedupeKey(f.ID, f.Level, ChannelEmail),
			Subject:    subject,
			Body:       findingBody(f, c.cfg),
			Recipients: append([]string(nil), recips...),
		})
	}
	if c.cfg.WebhookURL != "" {
		// A Finding always encodes (plain fields, times and slices).
		payload, _ := json.Marshal(FindingEvent{Event: "finding", Finding: f})
		out = append(out, halfmark.Notification{
			Channel: ChannelWebhook, Level: f.Level, FindingID: f.ID,
			DedupeKey: FindingDedupeKey(f.ID, f.Level, ChannelWebhook),
			Subject:   subject,
			Payload:   payload,
		})
	}
	return out
}

// DigestNotifications returns the daily Level 1 digest of the calendar day
// of day in loc (nil: the configured Location, else UTC) listing fs: one
// e-mail to the Level 1 recipients (when an SMTP host and such recipients
// are configured) and one "digest" webhook event (when a webhook URL is
// configured), keyed DigestDedupeKey(day, channel) so that a day has at
// most one digest per channel. No findings, no notifications.
func (c *Composer) DigestNotifications(day time.Time, loc *time.Location, fs []halfmark.Finding) []halfmark.Notification {
	if len(fs) == 0 {
		return nil
	}
	cfg := c.cfg
	if loc != nil {
		cfg.Location = loc
	}
	ds := dayString(day, cfg.loc())
	subject := digestSubject(ds, len(fs))
	var out []halfmark.Notification
	if recips := cfg.Recipients[halfmark.LevelInspect]; cfg.emailEnabled() && len(recips) > 0 {
		out = append(out, halfmark.Notification{
			Channel: ChannelEmail, Level: halfmark.LevelInspect, DigestDay: ds,
			DedupeKey:  DigestDedupeKey(ds, ChannelEmail),
			Subject:    subject,
			Body:       digestBody(ds, fs, cfg),
			Recipients: append([]string(nil), recips...),
		})
	}
	if cfg.WebhookURL != "" {
		payload, _ := json.Marshal(DigestEvent{Event: "digest", Day: ds, Level: halfmark.LevelInspect, Findings: fs})
		out = append(out, halfmark.Notification{
			Channel: ChannelWebhook, Level: halfmark.LevelInspect, DigestDay: ds,
			DedupeKey: DigestDedupeKey(ds, ChannelWebhook),
			Subject:   subject,
			Payload:   payload,
		})
	}
	return out
}
