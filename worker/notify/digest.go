package notify

import (
	"context"
	"fmt"
	"time"

	"halfmark"
)

// EnqueueDigest writes the daily Level 1 digest of the calendar day of day
// in loc (nil: the composer's Location, else UTC): it reads the Level 1
// findings active now and opened before the end of that day
// (store.DigestFindings), composes the digest (Composer.DigestNotifications)
// and writes it to the outbox (store.EnqueueNotifications). With no such
// finding, or no channel configured, nothing is written; a second call for
// the same day adds nothing (the dedupe key names the day).
func EnqueueDigest(ctx context.Context, store halfmark.DigestStore, c *Composer, day time.Time, loc *time.Location) error {
	if loc == nil {
		loc = c.cfg.loc()
	}
	emailOn := c.cfg.emailEnabled() && len(c.cfg.Recipients[halfmark.LevelInspect]) > 0
	if !emailOn && c.cfg.WebhookURL == "" {
		return nil
	}
	y, m, d := day.In(loc).Date()
	end := time.Date(y, m, d, 0, 0, 0, 0, loc).AddDate(0, 0, 1)
	fs, err := store.DigestFindings(ctx, end)
	if err != nil {
		return fmt.Errorf("read the Level 1 findings for the digest of %s: %w", dayString(day, loc), err)
	}
	ns := c.DigestNotifications(day, loc, fs)
	if len(ns) == 0 {
		return nil
	}
	if err := store.EnqueueNotifications(ctx, ns); err != nil {
		return fmt.Errorf("enqueue the digest of %s: %w", dayString(day, loc), err)
	}
	return nil
}
