package notify

import (
	"context"
	"encoding/json"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgxpool"

	"halfmark"
)

// insertAlert stores one alert row (migration 00002) and returns its id.
func insertAlert(t *testing.T, pool *pgxpool.Pool, machineID, beamID, seriesID int64, edge, quantity, family, rule string,
	level int, state string, dev, tol float64, opened time.Time) int64 {
	t.Helper()
	var ackAt, resolvedAt *time.Time
	switch state {
	case "acknowledged":
		ackAt = &opened
	case "resolved":
		resolvedAt = &opened
	}
	var id int64
	err := pool.QueryRow(context.Background(), `INSERT INTO alerts
		(machine_id, beam_id, series_id, edge, quantity, geometry, family, rule, level, state, message,
		 deviation_mm, tolerance_mm, opened_at, updated_at, ack_at, ack_by, resolved_at, resolved_by)
		VALUES ($1,$2,$3,$4,$5,'SSD 100 cm',$6,$7,$8,$9,$10,$11,$12,$13,$13,$14,CASE WHEN $14::timestamptz IS NULL THEN NULL ELSE 'physicist' END,$15,CASE WHEN $15::timestamptz IS NULL THEN NULL ELSE 'physicist' END)
		RETURNING id`,
		machineID, beamID, seriesID, edge, quantity, family, rule, level, state,
		edge+" "+rule, dev, tol, opened, ackAt, resolvedAt).Scan(&id)
	if err != nil {
		t.Fatalf("insert alert: %v", err)
	}
	return id
}

func TestDailyDigestListsLevel1AlertsOnce(t *testing.T) {
	ctx := context.Background()
	pool := newPool(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	h := newHook(t)
	cfg := baseConfig(ms, cliTLS, h, nil)
	loc := time.FixedZone("UTC+1", 3600)

	var machineID, beamID int64
	if err := pool.QueryRow(ctx, `INSERT INTO machines (name, sad_cm, created_by) VALUES ('Linac B', 100, 'test') RETURNING id`).Scan(&machineID); err != nil {
		t.Fatal(err)
	}
	if err := pool.QueryRow(ctx, `INSERT INTO beams (machine_id, energy_mv, fff, created_by) VALUES ($1, 10, true, 'test') RETURNING id`, machineID).Scan(&beamID); err != nil {
		t.Fatal(err)
	}
	series := map[string]int64{}
	for _, e := range []string{"X1", "Y2", "X2", "Y1", "B1P23"} {
		var id int64
		if err := pool.QueryRow(ctx, `INSERT INTO series (machine_id, beam_id, geometry, edge, quantity) VALUES ($1,$2,'SSD 100 cm',$3,'position') RETURNING id`,
			machineID, beamID, e).Scan(&id); err != nil {
			t.Fatal(err)
		}
		series[e] = id
	}
	day := time.Date(2026, 12, 2, 12, 0, 0, 0, loc)
	a1 := insertAlert(t, pool, machineID, beamID, series["X1"], "X1", "position", "nelson", "Nelson 2", 1, "open", 0.62, 1, time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC))
	a2 := insertAlert(t, pool, machineID, beamID, series["Y2"], "Y2", "position", "ewma", "EWMA beyond its control limit", 1, "acknowledged", -0.48, 1, time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC))
	// Not in the digest: resolved, Level 2, and one opened after the end of
	// 2 December in UTC+1 (23:30 UTC is 00:30 on 3 December there).
	insertAlert(t, pool, machineID, beamID, series["X2"], "X2", "position", "cusum", "CUSUM", 1, "resolved", 0.5, 1, time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC))
	insertAlert(t, pool, machineID, beamID, series["Y1"], "Y1", "position", "limit", "beyond tolerance", 2, "open", 1.2, 1, time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC))
	insertAlert(t, pool, machineID, beamID, series["B1P23"], "B1P23", "position", "trend", "projected crossing", 1, "open", 0.7, 1, time.Date(2026, 12, 2, 23, 30, 0, 0, time.UTC))

	// A day before every alert: nothing to send, no row.
	if err := EnqueueDigest(ctx, pool, time.Date(2026, 11, 20, 12, 0, 0, 0, loc), loc, cfg); err != nil {
		t.Fatal(err)
	}
	if rows := outboxRows(t, pool); len(rows) != 0 {
		t.Fatalf("a day without Level 1 alerts enqueued %d rows", len(rows))
	}

	if err := EnqueueDigest(ctx, pool, day, loc, cfg); err != nil {
		t.Fatalf("EnqueueDigest: %v", err)
	}
	rows := outboxRows(t, pool)
	if len(rows) != 2 || rows[0].Key != "digest:2026-12-02:email" || rows[1].Key != "digest:2026-12-02:webhook" {
		t.Fatalf("digest rows %+v, want one e-mail and one webhook for 2026-12-02", rows)
	}
	if err := EnqueueDigest(ctx, pool, day.Add(10*time.Hour), loc, cfg); err != nil { // 22:00 the same local day
		t.Fatal(err)
	}
	if rows := outboxRows(t, pool); len(rows) != 2 {
		t.Fatalf("a second digest for the same day added rows: %d", len(rows))
	}

	if n, err := New(pool, cfg, nil).RunOnce(ctx); n != 2 || err != nil {
		t.Fatalf("RunOnce = %d, %v", n, err)
	}
	msgs := ms.Messages()
	if len(msgs) != 1 {
		t.Fatalf("%d digest e-mails, want 1", len(msgs))
	}
	m := msgs[0]
	if got, want := m.Header(t, "Subject"), "[Halfmark] Level 1 — inspection: daily digest 2026-12-02, 2 alerts"; got != want {
		t.Errorf("Subject = %q, want %q", got, want)
	}
	if want := cfg.Recipients[halfmark.LevelInspect]; len(m.Rcpts) != 1 || m.Rcpts[0] != want[0] {
		t.Errorf("recipients %v, want the Level 1 list %v", m.Rcpts, want)
	}
	body := m.Body(t)
	for _, want := range []string{
		"Linac B, beam 10 MV FFF, edge X1", "Nelson 2", "+0.62 mm (tolerance ±1.00 mm)",
		"Linac B, beam 10 MV FFF, edge Y2", "EWMA beyond its control limit", "-0.48 mm", "acknowledged",
		"https://halfmark.physics.example/alerts/" + itoa(a1), "https://halfmark.physics.example/alerts/" + itoa(a2),
		SafetyCaution,
	} {
		if !strings.Contains(body, want) {
			t.Errorf("digest body lacks %q:\n%s", want, body)
		}
	}
	for _, not := range []string{"edge X2", "edge Y1", "B1P23"} {
		if strings.Contains(body, not) {
			t.Errorf("digest body lists %q, which is resolved, Level 2 or opened after the day:\n%s", not, body)
		}
	}
	// X1 was opened first, so it is listed first.
	if strings.Index(body, "edge X1") > strings.Index(body, "edge Y2") {
		t.Errorf("digest is not in opening order:\n%s", body)
	}

	reqs := h.Requests()
	if len(reqs) != 1 {
		t.Fatalf("%d digest webhooks, want 1", len(reqs))
	}
	verifySignature(t, cfg.WebhookSecret, reqs[0])
	var ev struct {
		Event  string           `json:"event"`
		Day    string           `json:"day"`
		Alerts []halfmark.Alert `json:"alerts"`
	}
	if err := json.Unmarshal(reqs[0].Body, &ev); err != nil {
		t.Fatal(err)
	}
	if ev.Event != "digest" || ev.Day != "2026-12-02" || len(ev.Alerts) != 2 || ev.Alerts[0].ID != a1 || ev.Alerts[1].ID != a2 {
		t.Errorf("digest webhook = %+v", ev)
	}

	// Delivered digests still block a repeat.
	if err := EnqueueDigest(ctx, pool, day, loc, cfg); err != nil {
		t.Fatal(err)
	}
	if n, err := New(pool, cfg, nil).RunOnce(ctx); n != 0 || err != nil || len(ms.Messages()) != 1 {
		t.Fatalf("a repeated digest was sent: %d, %v, %d e-mails", n, err, len(ms.Messages()))
	}
}

func itoa(n int64) string { b, _ := json.Marshal(n); return string(b) }
