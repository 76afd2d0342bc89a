package main

import (
	"strings"
	"testing"

	"halfmark/db/dbtest"
)

// `halfmark worker --once` evaluates once, delivers once and exits 0; a
// tolerance file with an error is refused with its line.
func TestWorkerOnce(t *testing.T) {
	url := dbtest.New(t)
	if code, _, errs := runCLI(t, url, "worker", "--once", "--timezone", "UTC"); code != 0 {
		t.Fatalf("worker --once: exit %d: %s", code, errs)
	}
	p := writeSeries(t, "[[limit]]\nquantity = \"position\"\nkind = \"monthly\"\ntolerance_mm = -1\naction_mm = 2\nsource = \"x\"\n")
	code, _, errs := runCLI(t, url, "worker", "--once", "--tolerances", p)
	if code != 1 || !strings.Contains(errs, "line 1: tolerance_mm = -1") {
		t.Errorf("bad tolerances: exit %d: %s", code, errs)
	}
	if code, _, _ := runCLI(t, url, "worker", "--once", "--timezone", "Mars/Olympus"); code != 2 {
		t.Errorf("bad time zone: exit %d, want 2", code)
	}
}
