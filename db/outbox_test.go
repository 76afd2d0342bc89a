package db_test

import (
	"context"
	"testing"
	"time"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func openOutboxStore(t *testing.T) *db.DB {
	t.Helper()
	ctx := context.Background()
	url := dbtest.New(t)
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatal(err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Close)
	return d
}

// The outbox claim protocol the deliverer relies on: most urgent level
// first; a held row is skipped by another claimer (FOR UPDATE SKIP
// LOCKED); Release gives a row back unchanged; Delivered and Failed record
// the outcome; rows not yet due, given up, skipped by id or on a skipped
// channel are not claimed.
func TestOutboxClaimOrderLocksAndOutcomes(t *testing.T) {
	ctx := context.Background()
	d := openOutboxStore(t)
	now := time.Date(2026, 12, 2, 7, 0, 0, 0, time.UTC)
	d.Now = func() time.Time { return now }
	ns := []halfmark.Notification{
		{Channel: halfmark.ChannelWebhook, Level: halfmark.LevelInspect, DigestDay: "2026-12-02", DedupeKey: "digest:2026-12-02:webhook", Payload: []byte(`{"event":"digest"}`)},
		{Channel: halfmark.ChannelEmail, Level: halfmark.LevelImmediate, FindingID: 9, DedupeKey: "finding:9:level:3:email", Subject: "s", Body: "b", Recipients: []string{"a@physics.example"}},
		{Channel: halfmark.ChannelWebhook, Level: halfmark.LevelScheduled, FindingID: 8, DedupeKey: "finding:8:level:2:webhook", Payload: []byte(`{"event":"finding"}`)},
	}
	if err := d.EnqueueNotifications(ctx, ns); err != nil {
		t.Fatal(err)
	}
	if err := d.EnqueueNotifications(ctx, ns[:1]); err != nil { // a repeated key adds nothing
		t.Fatal(err)
	}
	due := halfmark.OutboxDue{Now: now, MaxAttempts: 5}
	claim := func(due halfmark.OutboxDue) (halfmark.OutboxClaim, string) {
		t.Helper()
		c, ok, err := d.ClaimOutbox(ctx, due)
		if err != nil {
			t.Fatal(err)
		}
		if !ok {
			return nil, ""
		}
		return c, c.Row().DedupeKey
	}

	c3, k3 := claim(due)
	c2, k2 := claim(due) // c3 is still held
	c1, k1 := claim(due)
	if k3 != "finding:9:level:3:email" || k2 != "finding:8:level:2:webhook" || k1 != "digest:2026-12-02:webhook" {
		t.Fatalf("claimed %q, %q, %q; want Level 3, 2, 1 in that order, each once", k3, k2, k1)
	}
	if r := c3.Row(); r.FindingID != 9 || r.Level != halfmark.LevelImmediate || len(r.Recipients) != 1 || r.Subject != "s" || r.Body != "b" {
		t.Errorf("claimed row = %+v", r)
	}
	if r := c1.Row(); r.DigestDay != "2026-12-02" || string(r.Payload) != `{"event": "digest"}` && string(r.Payload) != `{"event":"digest"}` {
		t.Errorf("claimed digest row = %+v (payload %s)", r, r.Payload)
	}
	if _, k := claim(due); k != "" {
		t.Fatalf("claimed %q while every row is held", k)
	}
	c1.Release(ctx)
	if c, k := claim(due); k != k1 {
		t.Fatalf("after Release claimed %q, want %q again", k, k1)
	} else {
		c.Release(ctx)
	}

	if err := c3.Delivered(ctx, now); err != nil {
		t.Fatal(err)
	}
	next := now.Add(time.Hour)
	if err := c2.Failed(ctx, next, "webhook answered 503"); err != nil {
		t.Fatal(err)
	}
	c3.Release(ctx) // a no-op after Delivered
	if err := c3.Delivered(ctx, now); err == nil {
		t.Error("a second Delivered on one claim succeeded")
	}

	rows, err := d.OutboxRows(ctx, 0)
	if err != nil {
		t.Fatal(err)
	}
	if len(rows) != 3 {
		t.Fatalf("%d outbox rows, want 3", len(rows))
	}
	byKey := map[string]halfmark.OutboxRow{}
	for _, r := range rows {
		byKey[r.DedupeKey] = r
	}
	if r := byKey[k3]; r.DeliveredAt == nil || !r.DeliveredAt.Equal(now) || r.Attempts != 1 || r.LastError != "" {
		t.Errorf("delivered row = %+v", r)
	}
	if r := byKey[k2]; r.DeliveredAt != nil || r.Attempts != 1 || r.LastError != "webhook answered 503" || !r.NextAttemptAt.Equal(next) {
		t.Errorf("failed row = %+v", r)
	}
	if r := byKey[k1]; r.DeliveredAt != nil || r.Attempts != 0 {
		t.Errorf("released row = %+v", r)
	}

	// The failed row is not due before next; the digest row is skipped by
	// id, then by channel.
	if _, k := claim(halfmark.OutboxDue{Now: now, MaxAttempts: 5, SkipIDs: []int64{byKey[k1].ID}}); k != "" {
		t.Errorf("claimed %q: the failed row is not due and the other is skipped", k)
	}
	if _, k := claim(halfmark.OutboxDue{Now: next, MaxAttempts: 5, SkipChannels: []string{halfmark.ChannelWebhook}}); k != "" {
		t.Errorf("claimed %q on a skipped channel", k)
	}
	// After MaxAttempts attempts a row is given up.
	if c, k := claim(halfmark.OutboxDue{Now: next, MaxAttempts: 1}); k != k1 {
		t.Errorf("with MaxAttempts 1 claimed %q, want only %q (the failed row has used its attempt)", k, k1)
	} else {
		c.Release(ctx)
	}
	if c, k := claim(halfmark.OutboxDue{Now: next, MaxAttempts: 5}); k != k2 {
		t.Errorf("once due, claimed %q, want the failed Level 2 row %q", k, k2)
	} else {
		c.Release(ctx)
	}
}
