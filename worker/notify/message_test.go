package notify

import (
	"strings"
	"testing"

	"halfmark"
)

func TestAlertTextForPairsAndBeamLevelAlerts(t *testing.T) {
	al := level3Alert()
	al.Edge = "X1+X2"
	al.Quantity = ""
	if got := alertSubject(al); got != "[Halfmark] Level 3 — immediate action: Linac A 6 MV X1+X2" {
		t.Errorf("subject = %q", got)
	}
	if body := alertBody(al, Config{}); !strings.Contains(body, "Edges:") || !strings.Contains(body, "no dashboard URL is configured") {
		t.Errorf("pair body:\n%s", body)
	}

	// An overdue check: no series, no edge, no deviation, no names filled in.
	od := halfmark.Alert{ID: 9, MachineID: 4, BeamID: 8, Family: "overdue", Rule: "morning check overdue", Level: halfmark.LevelScheduled}
	if got := alertSubject(od); got != "[Halfmark] Level 2 — scheduled action: machine 4 beam 8" {
		t.Errorf("subject = %q", got)
	}
	body := alertBody(od, Config{DashboardURL: "https://h.example"})
	for _, want := range []string{"none (beam-level alert)", "From baseline:       not available", "https://h.example/alerts/9", SafetyCaution} {
		if !strings.Contains(body, want) {
			t.Errorf("overdue body lacks %q:\n%s", want, body)
		}
	}
}

func BenchmarkAlertBody(b *testing.B) {
	al := level3Alert()
	cfg := Config{DashboardURL: "https://halfmark.physics.example"}
	b.ReportAllocs()
	for b.Loop() {
		_ = alertBody(al, cfg)
	}
}

func BenchmarkSign1KiB(b *testing.B) {
	body := []byte(strings.Repeat("x", 1024))
	b.ReportAllocs()
	b.SetBytes(int64(len(body)))
	for b.Loop() {
		_ = Sign("secret", body)
	}
}
