package halfmark

import (
	"strings"
	"testing"
	"time"
)

// Free text: valid UTF-8, no control character but tab and newline (NUL,
// ESC, DEL and the C1 controls refused), within the length. Unicode
// Standard §23.1 (control codes: Cc).
func TestCheckText(t *testing.T) {
	for _, s := range []string{"", "X2 jaw recalibrated", "line one\nline two\tend", "Größe 10×10 cm"} {
		if err := CheckText("note", s, 0, 100); err != nil {
			t.Errorf("%q refused: %v", s, err)
		}
	}
	for _, s := range []string{"a\x00b", "\x1b[2J", "a\x7fb", "a\u0085b", "\xff\xfe", "a\rb", strings.Repeat("a", 101)} {
		err := CheckText("note", s, 0, 100)
		if ErrorCodeOf(err) != EInvalid || !strings.Contains(err.Error(), "note") {
			t.Errorf("%q: %v; want EInvalid naming the field", s, err)
		}
	}
}

// Machine names are one name after NFKC and case folding (Unicode Standard
// Annex #15; §5.18): "TERN", "Tern" and full-width "Ｔｅｒｎ" share a key; a
// zero-width space (U+200B, category Cf) is refused.
func TestMachineNames(t *testing.T) {
	k := MachineNameKey("Tern")
	for _, n := range []string{"TERN", "tern", " Tern ", "\uff34\uff45\uff52\uff4e"} {
		if MachineNameKey(n) != k {
			t.Errorf("%q: key %q, want %q", n, MachineNameKey(n), k)
		}
	}
	if MachineNameKey("Heron") == k {
		t.Error("Heron shares Tern's key")
	}
	for _, n := range []string{"Tern\u200b", "Te\u200drn", "\ufeffTern", "Tern\nHeron"} {
		m := Machine{Name: n}
		if ErrorCodeOf(m.Validate()) != EInvalid {
			t.Errorf("name %q accepted", n)
		}
	}
	m := Machine{Name: "\uff34\uff45\uff52\uff4e"}
	if err := m.Validate(); err != nil || m.Name != "Tern" {
		t.Errorf("full-width name: %q, %v; want stored as Tern", m.Name, err)
	}
}

// Layouts: the known names and COUNTxWIDTH specs, whose pair count must
// match the machine's (the 60-pair generic layout is 10×10 + 40×5 + 10×10
// mm, common practice).
func TestMLCLayouts(t *testing.T) {
	for spec, want := range map[string]int{"60": 60, "80": 80, "10x10,40x5,10x10": 60, "80x5": 80, " 20X2.5 , 40x5 ": 60} {
		if n, err := MLCLayoutPairs(spec); err != nil || n != want {
			t.Errorf("%q: %d, %v; want %d", spec, n, err, want)
		}
	}
	for _, spec := range []string{"banana", "", "60x", "x5", "0x5", "10x0", "10x-5", "10x1e999", "201x5", "150x5,100x5"} {
		if _, err := MLCLayoutPairs(spec); err == nil {
			t.Errorf("%q accepted", spec)
		}
	}
	m := Machine{Name: "Tern", MLCLeafPairs: 60, MLCLayout: "80x5"}
	if ErrorCodeOf(m.Validate()) != EInvalid {
		t.Error("an 80-pair layout on a 60-pair MLC was accepted")
	}
	m = Machine{Name: "Plover", MLCLayout: "60"}
	if ErrorCodeOf(m.Validate()) != EInvalid {
		t.Error("a layout on a machine without MLC was accepted")
	}
}

// Nominal energies on the whole/half-MV grid (common practice).
func TestBeamEnergyGrid(t *testing.T) {
	for _, e := range []float64{2.5, 4, 6, 10, 15, 18} {
		b := Beam{EnergyMV: e}
		if err := b.Validate(); err != nil {
			t.Errorf("%v MV refused: %v", e, err)
		}
	}
	for _, e := range []float64{6.0000000001, 6.1, 10.25} {
		b := Beam{EnergyMV: e}
		if ErrorCodeOf(b.Validate()) != EInvalid {
			t.Errorf("%v MV accepted", e)
		}
	}
}

// Corrections within a batch: not itself, not twice, no cycle, same machine
// and beam.
func TestCorrectionsWithinABatch(t *testing.T) {
	now := time.Date(2026, 3, 2, 12, 0, 0, 0, time.UTC)
	lookup := func(id int64) (Machine, []Beam, bool, error) {
		return Machine{ID: id, Name: "M", SADcm: 100, MLCLeafPairs: 60}, []Beam{{ID: id * 10, MachineID: id}}, true, nil
	}
	chk := func(id string, m int64, sup string) Check {
		return Check{ID: id, MachineID: m, BeamID: m * 10, Kind: KindMorning, MeasuredAt: now.Add(-time.Hour), Supersedes: sup,
			Edges: []EdgeResult{{Edge: "X1", PositionMM: 50}}}
	}
	const a, b, c = "00000000-0000-4000-8000-00000000000a", "00000000-0000-4000-8000-00000000000b", "00000000-0000-4000-8000-00000000000c"
	const old = "00000000-0000-4000-8000-0000000000ff"
	cases := map[string][]Check{
		"itself":             {chk(a, 1, a)},
		"two-check cycle":    {chk(a, 1, b), chk(b, 1, a)},
		"three-check cycle":  {chk(a, 1, b), chk(b, 1, c), chk(c, 1, a)},
		"corrected twice":    {chk(a, 1, old), chk(b, 1, old)},
		"another machine's":  {chk(a, 1, ""), chk(b, 2, a)},
		"leaf beyond 60":     {{ID: a, MachineID: 1, BeamID: 10, Kind: KindMorning, MeasuredAt: now.Add(-time.Hour), Edges: []EdgeResult{{Edge: "B1P61", PositionMM: 5}}}},
		"NUL in the note":    {{ID: a, MachineID: 1, BeamID: 10, Kind: KindMorning, MeasuredAt: now.Add(-time.Hour), Note: "a\x00", Edges: []EdgeResult{{Edge: "X1", PositionMM: 5}}}},
		"measured in year 1": {{ID: a, MachineID: 1, BeamID: 10, Kind: KindMorning, MeasuredAt: time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC), Edges: []EdgeResult{{Edge: "X1", PositionMM: 5}}}},
	}
	for name, cs := range cases {
		if err := ValidateChecks(cs, "checks", now, lookup); ErrorCodeOf(err) != EInvalid {
			t.Errorf("%s: %v; want EInvalid", name, err)
		}
	}
	ok := []Check{chk(a, 1, ""), chk(b, 1, a), chk(c, 1, b)}
	if err := ValidateChecks(ok, "checks", now, lookup); err != nil {
		t.Errorf("a chain of corrections: %v", err)
	}
}

// Projection to the isocentre plane: x·SAD/(SSD + depth) (similar
// triangles; analytic): 55 mm at SSD 100 cm, depth 10 cm, SAD 100 cm is
// 50 mm.
func TestProjectToIsocentre(t *testing.T) {
	ssd, depth, light := 100.0, 10.0, 55.0
	c := Check{Setup: Setup{SSDcm: &ssd, DepthCm: &depth}, Edges: []EdgeResult{{Edge: "X1", PositionMM: 55, LightPositionMM: &light}}}
	if err := c.ProjectToIsocentre(100); err != nil {
		t.Fatal(err)
	}
	if d := c.Edges[0].IsoPositionMM - 50; d > 1e-12 || d < -1e-12 || *c.Edges[0].IsoLightPositionMM != c.Edges[0].IsoPositionMM {
		t.Errorf("iso %v, light %v; want 50", c.Edges[0].IsoPositionMM, *c.Edges[0].IsoLightPositionMM)
	}
	iso := Check{Edges: []EdgeResult{{Edge: "X1", PositionMM: 50}}}
	if err := iso.ProjectToIsocentre(100); err != nil || iso.Edges[0].IsoPositionMM != 50 {
		t.Errorf("at the isocentre: %v %v", iso.Edges[0].IsoPositionMM, err)
	}
}

// NewUUID gives version-4 UUIDs (RFC 9562 §5.4: version nibble 4, variant
// bits 10).
func TestNewUUID(t *testing.T) {
	seen := map[string]bool{}
	for i := 0; i < 1000; i++ {
		u := NewUUID()
		if !IsUUID(u) || u[14] != '4' || !strings.ContainsRune("89ab", rune(u[19])) || seen[u] {
			t.Fatalf("%q", u)
		}
		seen[u] = true
	}
}

// Sign-off months and service-event dates within 1990 … now.
func TestDateWindows(t *testing.T) {
	now := time.Date(2026, 3, 2, 12, 0, 0, 0, time.UTC)
	for _, m := range []string{"9999-12", "0001-01", "2026-04", "1989-12", "2026-3"} {
		if ErrorCodeOf(ValidateSignOff(m, "", now)) != EInvalid {
			t.Errorf("month %s accepted", m)
		}
	}
	if err := ValidateSignOff("2026-03", "checked", now); err != nil {
		t.Errorf("the current month: %v", err)
	}
	ev := ServiceEvent{MachineID: 1, At: time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC), Note: "jaw"}
	if ErrorCodeOf(ev.Validate(now)) != EInvalid {
		t.Error("a service event in year 1 was accepted")
	}
	pen := 250.0
	b := Baseline{ValueMM: &pen, ValidFrom: now.Add(-time.Hour), Reason: "commissioning"}
	if ErrorCodeOf(b.ValidateFor(QPenumbra, now)) != EInvalid {
		t.Error("a 250 mm penumbra baseline was accepted")
	}
	pen = 3.5
	if err := b.ValidateFor(QPenumbra, now); err != nil {
		t.Errorf("a 3.5 mm penumbra baseline: %v", err)
	}
	b.ValidFrom = time.Date(9999, 12, 31, 0, 0, 0, 0, time.UTC)
	if ErrorCodeOf(b.ValidateFor(QPenumbra, now)) != EInvalid {
		t.Error("valid_from 9999-12-31 was accepted")
	}
}
