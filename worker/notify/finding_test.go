package notify

import (
	"context"
	"encoding/json"
	"fmt"
	"net/url"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"halfmark"
)

// dashboardPages are the dashboard pages a notification may link to.
var dashboardPages = regexp.MustCompile(`^/(findings(/[1-9][0-9]*)?|machines/[1-9][0-9]*)$`)

var linkRE = regexp.MustCompile(`https?://[^\s)>"]+`)

// checkLinks fails unless every link in text is a dashboard page on cfg's
// dashboard, and returns the paths.
func checkLinks(t *testing.T, cfg Config, text string) []string {
	t.Helper()
	var paths []string
	for _, l := range linkRE.FindAllString(text, -1) {
		u, err := url.Parse(l)
		if err != nil || !strings.HasPrefix(l, cfg.DashboardURL+"/") || !dashboardPages.MatchString(u.Path) {
			t.Errorf("link %q is not a dashboard page (/findings/<id>, /findings or /machines/<id>)", l)
			continue
		}
		paths = append(paths, u.Path)
	}
	return paths
}

// A Level 2 finding stored through the real store with the Composer
// enqueues one e-mail and one webhook in the evaluation's transaction; a
// repeat at the same level enqueues nothing; an escalation to Level 3
// enqueues again; the deliverer sends them over a real SMTP session and a
// real HTTP POST, and the e-mail links to the finding's page.
func TestLevel2FindingNotifiesOnceThenAgainOnEscalation(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	h := newHook(t)
	cfg := baseConfig(ms, cliTLS, h, nil)
	comp := NewComposer(cfg)
	heron := newMachine(t, st, "Heron")
	at := time.Date(2026, 11, 30, 7, 30, 0, 0, time.UTC)

	record(t, st, heron, at, comp, verdict(bankFinding(halfmark.LevelScheduled)))
	f := activeFinding(t, st, heron)
	rows := outboxRows(t, st)
	var keys []string
	for _, r := range rows {
		keys = append(keys, r.DedupeKey)
		if r.FindingID != f.ID || r.Level != halfmark.LevelScheduled {
			t.Errorf("row %s: finding %d level %d, want finding %d level 2", r.DedupeKey, r.FindingID, r.Level, f.ID)
		}
	}
	id := strconv.FormatInt(f.ID, 10)
	if want := []string{"finding:" + id + ":level:2:email", "finding:" + id + ":level:2:webhook"}; !slices.Equal(keys, want) {
		t.Fatalf("outbox after a Level 2 finding: %v, want %v", keys, want)
	}

	// The same finding at the same level on the next run: nothing new.
	record(t, st, heron, at.Add(24*time.Hour), comp, verdict(bankFinding(halfmark.LevelScheduled)))
	if got := len(outboxRows(t, st)); got != 2 {
		t.Fatalf("outbox has %d rows after a repeat at Level 2, want still 2", got)
	}

	d := New(st, cfg, nil)
	if n, err := d.RunOnce(ctx); n != 2 || err != nil {
		t.Fatalf("RunOnce = %d, %v; want 2 deliveries", n, err)
	}
	msgs := ms.Messages()
	if len(msgs) != 1 {
		t.Fatalf("SMTP server got %d messages, want 1", len(msgs))
	}
	m := msgs[0]
	if !m.TLS {
		t.Errorf("the message was sent without STARTTLS although the policy is mandatory")
	}
	if got, want := m.Header(t, "Subject"), "[Halfmark] Level 2 — scheduled action: Heron MLC bank 2"; got != want {
		t.Errorf("Subject = %q, want %q", got, want)
	}
	if got, want := m.Header(t, "Message-ID"), "<halfmark.finding."+id+".level.2.email@halfmark.physics.example>"; got != want {
		t.Errorf("Message-ID = %q, want %q (stable, from the dedupe key)", got, want)
	}
	if got := m.Header(t, HeaderDelivery); got != "finding:"+id+":level:2:email" {
		t.Errorf("%s = %q", HeaderDelivery, got)
	}
	if got := m.Header(t, "Auto-Submitted"); got != "auto-generated" { // RFC 3834 §5
		t.Errorf("Auto-Submitted = %q", got)
	}
	if want := cfg.Recipients[halfmark.LevelScheduled]; !slices.Equal(m.Rcpts, want) {
		t.Errorf("recipients %v, want the Level 2 list %v", m.Rcpts, want)
	}
	body := m.Body(t)
	for _, want := range []string{
		"Machine:     Heron",
		"Component:   MLC bank 2",
		// TG-142 (Klein et al. 2009): Level 2 is a scheduled action, within one or two working days.
		"Level 2 — scheduled action (beyond tolerance: schedule a correction within one or two working days)",
		"Magnitude:   +0.90 mm outward (95% interval +0.72 to +1.08 mm)",
		"Onset:       2026-11-17",
		"Crossing:    already beyond tolerance",
		"- series 101: beam 6 MV, setup SSD 100 cm, 20x20 cm, method epid, edge B2P29, 50% edge position (isocentre plane); rules limit, cusum; +0.95 mm from baseline",
		"- series 102: beam 10 MV FFF, setup SSD 100 cm, 20x20 cm, method epid, edge B2P30",
		"The mean of MLC bank 2 is 0.90 mm outward",
		"Open the finding: https://halfmark.physics.example/findings/" + id + "\n",
		fmt.Sprintf("Open the machine: https://halfmark.physics.example/machines/%d\n", heron),
		SafetyCaution,
	} {
		if !strings.Contains(body, want) {
			t.Errorf("e-mail body lacks %q:\n%s", want, body)
		}
	}
	paths := checkLinks(t, cfg, body)
	if !slices.Contains(paths, "/findings/"+id) {
		t.Errorf("the e-mail does not link to /findings/%s: %v", id, paths)
	}
	// Already beyond tolerance: no crossing date is shown.
	if regexp.MustCompile(`Crossing:.*\d{4}-\d{2}-\d{2}`).MatchString(body) {
		t.Errorf("a crossing date is shown for a finding already beyond tolerance:\n%s", body)
	}

	reqs := h.Requests()
	if len(reqs) != 1 {
		t.Fatalf("webhook got %d requests, want 1", len(reqs))
	}
	r := reqs[0]
	verifySignature(t, cfg.WebhookSecret, r)
	if got := r.Header.Get(HeaderDelivery); got != "finding:"+id+":level:2:webhook" {
		t.Errorf("%s = %q", HeaderDelivery, got)
	}
	if got := r.Header.Get(HeaderEvent); got != "finding" {
		t.Errorf("%s = %q, want finding", HeaderEvent, got)
	}
	var ev struct {
		Event   string           `json:"event"`
		Finding halfmark.Finding `json:"finding"`
		SentAt  time.Time        `json:"sent_at"`
	}
	if err := json.Unmarshal(r.Body, &ev); err != nil {
		t.Fatalf("webhook body is not the expected JSON: %v\n%s", err, r.Body)
	}
	if ev.Event != "finding" || ev.Finding.ID != f.ID || ev.Finding.MachineID != heron || ev.Finding.Machine != "Heron" ||
		ev.Finding.Kind != halfmark.ComponentMLCBank || ev.Finding.Name != "bank 2" || ev.Finding.Level != halfmark.LevelScheduled ||
		ev.Finding.MagnitudeMM != 0.9 || len(ev.Finding.Evidence) != 2 || ev.SentAt.IsZero() {
		t.Errorf("webhook payload = %+v", ev)
	}
	var raw map[string]json.RawMessage
	_ = json.Unmarshal(r.Body, &raw)
	var fr map[string]json.RawMessage
	_ = json.Unmarshal(raw["finding"], &fr)
	for _, k := range []string{"component_kind", "component", "magnitude_ci_mm", "onset", "crossing", "evidence"} {
		if _, ok := fr[k]; !ok {
			t.Errorf("webhook finding lacks %q: %s", k, raw["finding"])
		}
	}

	// Escalation to Level 3: notified again, to the Level 3 list.
	record(t, st, heron, at.Add(48*time.Hour), comp, verdict(bankFinding(halfmark.LevelImmediate)))
	if f3 := activeFinding(t, st, heron); f3.ID != f.ID || f3.Level != halfmark.LevelImmediate {
		t.Fatalf("after escalation: finding %d level %d, want finding %d at Level 3", f3.ID, f3.Level, f.ID)
	}
	if got := len(outboxRows(t, st)); got != 4 {
		t.Fatalf("outbox has %d rows after the escalation, want 4", got)
	}
	record(t, st, heron, at.Add(72*time.Hour), comp, verdict(bankFinding(halfmark.LevelImmediate)))
	if got := len(outboxRows(t, st)); got != 4 {
		t.Fatalf("outbox has %d rows after a repeat at Level 3, want still 4", got)
	}
	if n, err := d.RunOnce(ctx); n != 2 || err != nil {
		t.Fatalf("RunOnce after the escalation = %d, %v; want 2", n, err)
	}
	msgs = ms.Messages()
	if len(msgs) != 2 || len(h.Requests()) != 2 {
		t.Fatalf("%d e-mails and %d webhooks in all, want 2 and 2", len(msgs), len(h.Requests()))
	}
	if got, want := msgs[1].Header(t, "Subject"), "[Halfmark] Level 3 — immediate action: Heron MLC bank 2"; got != want {
		t.Errorf("escalation Subject = %q, want %q", got, want)
	}
	if want := cfg.Recipients[halfmark.LevelImmediate]; !slices.Equal(msgs[1].Rcpts, want) {
		t.Errorf("escalation recipients %v, want the Level 3 list %v", msgs[1].Rcpts, want)
	}
	if got := msgs[1].Header(t, HeaderDelivery); got != "finding:"+id+":level:3:email" {
		t.Errorf("escalation %s = %q", HeaderDelivery, got)
	}
	checkLinks(t, cfg, msgs[1].Body(t))
}

// The notifications exist if and only if the finding's change commits: a
// machine evaluation that fails after composing them leaves no outbox row
// and no finding.
func TestFindingNotificationsFollowTheEvaluationTransaction(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	cfg := Config{SMTPHost: "127.0.0.1", From: "halfmark@physics.example", WebhookURL: "http://127.0.0.1:1/h",
		Recipients: map[halfmark.Level][]string{halfmark.LevelScheduled: {"a@physics.example"}}}
	heron := newMachine(t, st, "Heron")
	bad := bankFinding(halfmark.LevelScheduled)
	bad.Kind = "gantry" // not a component kind: the findings table refuses it
	ev := &halfmark.MachineEvaluation{MachineID: heron, At: time.Now(), ToleranceHash: "test",
		Components: []halfmark.ComponentVerdict{verdict(bankFinding(halfmark.LevelScheduled)), verdict(bad)}}
	if err := st.RecordMachineEvaluation(ctx, ev, NewComposer(cfg)); err == nil {
		t.Fatal("RecordMachineEvaluation with an unknown component kind succeeded")
	}
	if rows := outboxRows(t, st); len(rows) != 0 {
		t.Fatalf("a rolled-back evaluation left %d outbox rows", len(rows))
	}
	if fs, err := st.Findings(ctx, halfmark.FindingFilter{State: "all"}); err != nil || len(fs) != 0 {
		t.Fatalf("a rolled-back evaluation left findings %v (%v)", fs, err)
	}
}

func TestFindingNotificationsByLevelAndConfig(t *testing.T) {
	full := Config{SMTPHost: "127.0.0.1", From: "halfmark@physics.example", WebhookURL: "http://127.0.0.1:1/h",
		Recipients: map[halfmark.Level][]string{halfmark.LevelScheduled: {"b@physics.example"}}}
	cases := []struct {
		name  string
		id    int64
		level halfmark.Level
		cfg   Config
		want  []string // channels
	}{
		{"level 1 goes to the digest", 5, halfmark.LevelInspect, full, nil},
		{"level 2", 5, halfmark.LevelScheduled, full, []string{ChannelEmail, ChannelWebhook}},
		{"level 3 without level 3 recipients", 5, halfmark.LevelImmediate, full, []string{ChannelWebhook}},
		{"no SMTP host", 5, halfmark.LevelScheduled, Config{Recipients: full.Recipients, WebhookURL: full.WebhookURL}, []string{ChannelWebhook}},
		{"nothing configured", 5, halfmark.LevelImmediate, Config{}, nil},
		{"not stored", 0, halfmark.LevelImmediate, full, nil},
		{"unknown level", 5, 7, full, nil},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			ns := NewComposer(c.cfg).FindingNotifications(storedFinding(c.id, c.level))
			var got []string
			for _, n := range ns {
				got = append(got, n.Channel)
				if want := FindingDedupeKey(c.id, c.level, n.Channel); n.DedupeKey != want || n.FindingID != c.id || n.Level != c.level {
					t.Errorf("%s row: key %q finding %d level %d, want key %q", n.Channel, n.DedupeKey, n.FindingID, n.Level, want)
				}
			}
			if !slices.Equal(got, c.want) {
				t.Errorf("channels %v, want %v", got, c.want)
			}
		})
	}
}
