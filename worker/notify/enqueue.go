package notify

import (
	"context"
	"encoding/json"
	"fmt"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"halfmark"
)

// The delivery channels of an outbox row.
const (
	ChannelEmail   = "email"
	ChannelWebhook = "webhook"
)

// AlertDedupeKey is the outbox key of one alert's notification at one
// level on one channel: "alert:42:level:3:email". An alert that escalates
// from Level 2 to Level 3 is notified again; a repeat at the same level is
// not.
func AlertDedupeKey(alertID int64, level halfmark.Level, channel string) string {
	return "alert:" + strconv.FormatInt(alertID, 10) + ":level:" + strconv.Itoa(int(level)) + ":" + channel
}

// DigestDedupeKey is the outbox key of the daily digest of day
// ("2026-12-02") on one channel: "digest:2026-12-02:email".
func DigestDedupeKey(day, channel string) string { return "digest:" + day + ":" + channel }

// outboxRow is one notification to insert.
type outboxRow struct {
	channel    string
	level      halfmark.Level
	alertID    *int64
	digestDay  *string // "2006-01-02"
	dedupeKey  string
	subject    string
	body       string
	payload    []byte // JSON; nil for e-mail
	recipients []string
}

const insertOutbox = `INSERT INTO outbox (channel, level, alert_id, digest_day, dedupe_key, subject, body, payload, recipients, next_attempt_at)
VALUES ($1, $2, $3, $4::date, $5, $6, $7, $8, $9, $10)
ON CONFLICT (dedupe_key) DO NOTHING`

func insertRows(ctx context.Context, tx pgx.Tx, rows []outboxRow, now time.Time) error {
	for _, r := range rows {
		recips := r.recipients
		if recips == nil {
			recips = []string{}
		}
		if _, err := tx.Exec(ctx, insertOutbox, r.channel, int(r.level), r.alertID, r.digestDay, r.dedupeKey,
			r.subject, r.body, r.payload, recips, now); err != nil {
			return fmt.Errorf("enqueue notification %s: %w", r.dedupeKey, err)
		}
	}
	return nil
}

// alertEvent is the stored webhook payload of an alert; the deliverer adds
// "sent_at" when it posts it.
type alertEvent struct {
	Event string         `json:"event"` // "alert"
	Alert halfmark.Alert `json:"alert"`
}

// digestEvent is the stored webhook payload of a daily digest.
type digestEvent struct {
	Event  string           `json:"event"` // "digest"
	Day    string           `json:"day"`   // "2006-01-02" in the digest's time zone
	Level  halfmark.Level   `json:"level"` // always 1
	Alerts []halfmark.Alert `json:"alerts"`
}

// EnqueueAlert writes the notifications of a Level 2 or Level 3 alert into
// the outbox inside the caller's transaction, so that they exist if and
// only if the alert change commits: one e-mail row when cfg has an SMTP
// host and recipients for al.Level, and one webhook row when cfg has a
// webhook URL. Level 0 and Level 1 alerts enqueue nothing (Level 1 goes to
// the daily digest, see EnqueueDigest). A repeat for the same alert and
// level adds nothing (ON CONFLICT on the dedupe key).
//
// It returns EInvalid for an alert without an ID or with an unknown level.
func EnqueueAlert(ctx context.Context, tx pgx.Tx, al halfmark.Alert, cfg Config) error {
	if al.Level < halfmark.LevelInControl || al.Level > halfmark.LevelImmediate {
		return halfmark.Errorf(halfmark.EInvalid, "alert %d has level %d; levels run from 0 to 3", al.ID, al.Level)
	}
	if al.Level < halfmark.LevelScheduled {
		return nil
	}
	if al.ID <= 0 {
		return halfmark.Errorf(halfmark.EInvalid, "the alert has no ID (got %d): store it before enqueueing its notification", al.ID)
	}
	var rows []outboxRow
	id := al.ID
	if recips := cfg.Recipients[al.Level]; cfg.emailEnabled() && len(recips) > 0 {
		rows = append(rows, outboxRow{
			channel: ChannelEmail, level: al.Level, alertID: &id,
			dedupeKey:  AlertDedupeKey(al.ID, al.Level, ChannelEmail),
			subject:    alertSubject(al),
			body:       alertBody(al, cfg),
			recipients: recips,
		})
	}
	if cfg.WebhookURL != "" {
		payload, err := json.Marshal(alertEvent{Event: "alert", Alert: al})
		if err != nil {
			return fmt.Errorf("encode alert %d for the webhook: %w", al.ID, err)
		}
		rows = append(rows, outboxRow{
			channel: ChannelWebhook, level: al.Level, alertID: &id,
			dedupeKey: AlertDedupeKey(al.ID, al.Level, ChannelWebhook),
			subject:   alertSubject(al),
			payload:   payload,
		})
	}
	return insertRows(ctx, tx, rows, cfg.now())
}

// EnqueueDigest writes at most one daily digest per channel for the
// calendar day of day in loc (nil: cfg.Location, else UTC): an e-mail to
// the Level 1 recipients and, when a webhook is configured, a "digest"
// webhook event. The digest lists the Level 1 alerts that are open or
// acknowledged now and were opened before the end of that day. With no such
// alert nothing is written; a second call for the same day adds nothing.
func EnqueueDigest(ctx context.Context, pool *pgxpool.Pool, day time.Time, loc *time.Location, cfg Config) error {
	if loc == nil {
		loc = cfg.loc()
	}
	cfg.Location = loc
	emailOn := cfg.emailEnabled() && len(cfg.Recipients[halfmark.LevelInspect]) > 0
	if !emailOn && cfg.WebhookURL == "" {
		return nil
	}
	y, m, d := day.In(loc).Date()
	end := time.Date(y, m, d, 0, 0, 0, 0, loc).AddDate(0, 0, 1)
	ds := dayString(day, loc)
	return pgx.BeginFunc(ctx, pool, func(tx pgx.Tx) error {
		alerts, err := digestAlerts(ctx, tx, end)
		if err != nil {
			return err
		}
		if len(alerts) == 0 {
			return nil
		}
		var rows []outboxRow
		subject := digestSubject(ds, len(alerts))
		if emailOn {
			rows = append(rows, outboxRow{
				channel: ChannelEmail, level: halfmark.LevelInspect, digestDay: &ds,
				dedupeKey:  DigestDedupeKey(ds, ChannelEmail),
				subject:    subject,
				body:       digestBody(ds, alerts, cfg),
				recipients: cfg.Recipients[halfmark.LevelInspect],
			})
		}
		if cfg.WebhookURL != "" {
			payload, err := json.Marshal(digestEvent{Event: "digest", Day: ds, Level: halfmark.LevelInspect, Alerts: alerts})
			if err != nil {
				return fmt.Errorf("encode the digest of %s for the webhook: %w", ds, err)
			}
			rows = append(rows, outboxRow{
				channel: ChannelWebhook, level: halfmark.LevelInspect, digestDay: &ds,
				dedupeKey: DigestDedupeKey(ds, ChannelWebhook),
				subject:   subject,
				payload:   payload,
			})
		}
		return insertRows(ctx, tx, rows, cfg.now())
	})
}

// digestQuery reads what the digest needs from the alerts table (and the
// machine and beam names). It is the whole contract between the outbox and
// the alerts table.
const digestQuery = `SELECT a.id, a.machine_id, COALESCE(m.name, ''), a.beam_id, b.energy_mv, b.fff,
       a.series_id, a.edge, a.quantity, a.geometry, a.family, a.rule,
       a.level, a.state, a.message, a.deviation_mm, a.tolerance_mm, a.action_mm, a.projected_crossing,
       a.opened_at, a.updated_at
FROM alerts a
LEFT JOIN machines m ON m.id = a.machine_id
LEFT JOIN beams b ON b.id = a.beam_id
WHERE a.level = 1 AND a.state IN ('open', 'acknowledged') AND a.opened_at < $1
ORDER BY m.name, a.opened_at, a.id`

func digestAlerts(ctx context.Context, tx pgx.Tx, before time.Time) ([]halfmark.Alert, error) {
	rows, err := tx.Query(ctx, digestQuery, before)
	if err != nil {
		return nil, fmt.Errorf("read the Level 1 alerts for the digest: %w", err)
	}
	defer rows.Close()
	var out []halfmark.Alert
	for rows.Next() {
		var (
			al       halfmark.Alert
			energyMV *float64
			fff      *bool
			quantity string
			level    int
			state    string
		)
		if err := rows.Scan(&al.ID, &al.MachineID, &al.MachineName, &al.BeamID, &energyMV, &fff,
			&al.SeriesID, &al.Edge, &quantity, &al.Geometry, &al.Family, &al.Rule,
			&level, &state, &al.Message, &al.DeviationMM, &al.ToleranceMM, &al.ActionMM, &al.ProjectedCrossing,
			&al.OpenedAt, &al.UpdatedAt); err != nil {
			return nil, fmt.Errorf("read the Level 1 alerts for the digest: %w", err)
		}
		if energyMV != nil {
			al.BeamLabel = halfmark.BeamLabel(*energyMV, fff != nil && *fff)
		}
		al.Quantity = halfmark.Quantity(quantity)
		al.Level = halfmark.Level(level)
		al.State = halfmark.AlertState(state)
		out = append(out, al)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("read the Level 1 alerts for the digest: %w", err)
	}
	return out, nil
}
