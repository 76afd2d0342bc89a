package notify

import (
	"context"
	"encoding/json"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"halfmark"
)

// level1 is an active Level 1 verdict for a component; the values are
// invented for the test.
func level1(kind halfmark.ComponentKind, name string, magnitudeMM float64, crossing halfmark.FindingCrossing) halfmark.ComponentVerdict {
	return verdict(halfmark.Finding{
		Component: halfmark.Component{Kind: kind, Name: name}, Direction: 1, Level: halfmark.LevelInspect,
		MagnitudeMM: magnitudeMM, MagnitudeCIMM: [2]float64{magnitudeMM - 0.1, magnitudeMM + 0.1}, Crossing: crossing,
		Evidence: []halfmark.Evidence{{SeriesID: 7, Beam: "6 MV", Geometry: "SSD 100 cm, 10x10 cm", Method: halfmark.MethodTyped,
			Edge: name, Quantity: halfmark.QPosition, Rules: []string{"cusum", "trend"}, Level: halfmark.LevelInspect}},
	})
}

// The daily digest lists the Level 1 findings active on the day (in the
// site's time zone), each linked to its page, once per day; a day without
// them sends nothing.
func TestDailyDigestListsLevel1FindingsOnce(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	h := newHook(t)
	cfg := baseConfig(ms, cliTLS, h, nil)
	comp := NewComposer(cfg)
	loc := time.FixedZone("UTC+1", 3600)
	tern, heron, plover := newMachine(t, st, "Tern"), newMachine(t, st, "Heron"), newMachine(t, st, "Plover")

	tolDate := time.Date(2027, 1, 18, 0, 0, 0, 0, time.UTC)
	lo, hi := time.Date(2027, 1, 9, 0, 0, 0, 0, time.UTC), time.Date(2027, 1, 30, 0, 0, 0, 0, time.UTC)
	projected := halfmark.FindingCrossing{Status: halfmark.CrossingProjected, ToleranceDate: &tolDate, ToleranceInterval: [2]*time.Time{&lo, &hi}}
	record(t, st, tern, time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC), comp, level1(halfmark.ComponentJaw, "Y2", 0.62, projected))
	record(t, st, heron, time.Date(2026, 12, 2, 9, 0, 0, 0, time.UTC), comp,
		level1(halfmark.ComponentMLCLeaf, "B1P23", -0.48, halfmark.FindingCrossing{Status: halfmark.CrossingNotSignificant}),
		verdict(bankFinding(halfmark.LevelScheduled))) // Level 2: notified at once, not in the digest
	// Not in the digest: resolved, and opened after the end of 2 December in
	// UTC+1 (23:30 UTC is 00:30 on 3 December there).
	record(t, st, plover, time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC), comp, level1(halfmark.ComponentLightField, "X1", 0.5, halfmark.FindingCrossing{}))
	record(t, st, plover, time.Date(2026, 12, 1, 9, 0, 0, 0, time.UTC), comp, halfmark.ComponentVerdict{
		Finding: halfmark.Finding{Component: halfmark.Component{Kind: halfmark.ComponentLightField, Name: "X1"}, Direction: 1}, BackInControl: true})
	record(t, st, tern, time.Date(2026, 12, 2, 23, 30, 0, 0, time.UTC), comp,
		level1(halfmark.ComponentPenumbra, "6 MV FFF", 0.3, halfmark.FindingCrossing{Status: halfmark.CrossingBeyondHorizon}))
	if n := len(outboxRows(t, st)); n != 2 {
		t.Fatalf("%d outbox rows before the digest, want the Level 2 finding's 2", n)
	}
	// Deliver the Level 2 rows first so that only the digest remains.
	if n, err := New(st, cfg, nil).RunOnce(ctx); n != 2 || err != nil {
		t.Fatalf("RunOnce for the Level 2 finding = %d, %v", n, err)
	}
	before := len(ms.Messages())

	// A day before every finding: nothing to send, no row.
	if err := EnqueueDigest(ctx, st, comp, time.Date(2026, 11, 20, 12, 0, 0, 0, loc), loc); err != nil {
		t.Fatal(err)
	}
	if n := len(outboxRows(t, st)); n != 2 {
		t.Fatalf("a day without Level 1 findings enqueued %d rows", n-2)
	}

	day := time.Date(2026, 12, 2, 12, 0, 0, 0, loc)
	if err := EnqueueDigest(ctx, st, comp, day, loc); err != nil {
		t.Fatalf("EnqueueDigest: %v", err)
	}
	var keys []string
	for _, r := range outboxRows(t, st)[2:] {
		keys = append(keys, r.DedupeKey)
		if r.DigestDay != "2026-12-02" || r.Level != halfmark.LevelInspect {
			t.Errorf("digest row %s: day %q level %d", r.DedupeKey, r.DigestDay, r.Level)
		}
	}
	if want := []string{"digest:2026-12-02:email", "digest:2026-12-02:webhook"}; !slices.Equal(keys, want) {
		t.Fatalf("digest rows %v, want %v", keys, want)
	}
	if err := EnqueueDigest(ctx, st, comp, day.Add(10*time.Hour), loc); err != nil { // 22:00 the same local day
		t.Fatal(err)
	}
	if n := len(outboxRows(t, st)); n != 4 {
		t.Fatalf("a second digest for the same day added rows: %d in all, want 4", n)
	}

	if n, err := New(st, cfg, nil).RunOnce(ctx); n != 2 || err != nil {
		t.Fatalf("RunOnce = %d, %v", n, err)
	}
	msgs := ms.Messages()[before:]
	if len(msgs) != 1 {
		t.Fatalf("%d digest e-mails, want 1", len(msgs))
	}
	m := msgs[0]
	if got, want := m.Header(t, "Subject"), "[Halfmark] Level 1 — inspection: daily digest 2026-12-02, 2 findings"; got != want {
		t.Errorf("Subject = %q, want %q", got, want)
	}
	if want := cfg.Recipients[halfmark.LevelInspect]; !slices.Equal(m.Rcpts, want) {
		t.Errorf("recipients %v, want the Level 1 list %v", m.Rcpts, want)
	}
	fs, err := st.Findings(ctx, halfmark.FindingFilter{State: "all"})
	if err != nil {
		t.Fatal(err)
	}
	idOf := map[string]int64{}
	for _, f := range fs {
		idOf[f.Machine+" "+f.Component.Label()] = f.ID
	}
	heronLeaf, ternJaw := idOf["Heron leaf B1P23"], idOf["Tern jaw Y2"]
	body := m.Body(t)
	for _, want := range []string{
		"1. Heron, leaf B1P23 (finding " + strconv.FormatInt(heronLeaf, 10) + ", open)",
		"Magnitude: -0.48 mm inward (95% interval -0.58 to -0.38 mm)",
		"Crossing: no significant trend since the onset",
		"2. Tern, jaw Y2 (finding " + strconv.FormatInt(ternJaw, 10) + ", open)",
		"Crossing: projected to reach tolerance on 2027-01-18 (95% interval 2027-01-09 to 2027-01-30)",
		"- series 7: beam 6 MV, setup SSD 100 cm, 10x10 cm, method typed, edge Y2, 50% edge position (isocentre plane); rules cusum, trend",
		"https://halfmark.physics.example/findings/" + strconv.FormatInt(heronLeaf, 10) + "\n",
		"https://halfmark.physics.example/findings/" + strconv.FormatInt(ternJaw, 10) + "\n",
		"All findings: https://halfmark.physics.example/findings\n",
		SafetyCaution,
	} {
		if !strings.Contains(body, want) {
			t.Errorf("digest body lacks %q:\n%s", want, body)
		}
	}
	for _, not := range []string{"bank 2", "light field X1", "penumbra"} {
		if strings.Contains(body, not) {
			t.Errorf("digest body lists %q, which is Level 2, resolved or opened after the day:\n%s", not, body)
		}
	}
	paths := checkLinks(t, cfg, body)
	if len(paths) != 3 {
		t.Errorf("digest links %v, want the two findings and /findings", paths)
	}

	reqs := h.Requests()
	verifySignature(t, cfg.WebhookSecret, reqs[len(reqs)-1])
	var ev struct {
		Event    string             `json:"event"`
		Day      string             `json:"day"`
		Level    int                `json:"level"`
		Findings []halfmark.Finding `json:"findings"`
	}
	if err := json.Unmarshal(reqs[len(reqs)-1].Body, &ev); err != nil {
		t.Fatal(err)
	}
	if ev.Event != "digest" || ev.Day != "2026-12-02" || ev.Level != 1 || len(ev.Findings) != 2 ||
		ev.Findings[0].ID != heronLeaf || ev.Findings[1].ID != ternJaw {
		t.Errorf("digest webhook = %+v", ev)
	}

	// Delivered digests still block a repeat.
	if err := EnqueueDigest(ctx, st, comp, day, loc); err != nil {
		t.Fatal(err)
	}
	if n, err := New(st, cfg, nil).RunOnce(ctx); n != 0 || err != nil || len(ms.Messages()) != before+1 {
		t.Fatalf("a repeated digest was sent: %d, %v, %d e-mails", n, err, len(ms.Messages()))
	}
}
