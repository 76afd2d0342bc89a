package tolerance

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"halfmark"
)

// The shipped book carries the AAPM TG-142 values (Klein et al., Med Phys
// 36:4197, 2009; physics.md): daily collimator size indicator 2 mm (seen);
// monthly jaw position indicators symmetric 2 mm, asymmetric 1 mm
// (secondary); light/radiation coincidence symmetric 2 mm, asymmetric 1 mm
// (seen); MLC leaf position 1 mm (from memory). Penumbra is a local choice
// (no published tolerance, physics.md).
func TestShippedTolerances(t *testing.T) {
	b := Shipped()
	if !b.IsShippedExample() || !strings.Contains(b.Source(), "shipped") || len(b.Hash()) != 64 {
		t.Fatalf("shipped %v source %q hash %q", b.IsShippedExample(), b.Source(), b.Hash())
	}
	for _, c := range []struct {
		q    halfmark.Quantity
		kind halfmark.CheckKind
		edge string
		asym bool
		tol  float64
		src  string
	}{
		{halfmark.QPosition, halfmark.KindMorning, "X1", false, 2, "TG-142"},
		{halfmark.QPosition, halfmark.KindMorning, "Y2", true, 2, "TG-142"},
		{halfmark.QPosition, halfmark.KindMonthly, "X2", false, 2, "TG-142"},
		{halfmark.QPosition, halfmark.KindMonthly, "X2", true, 1, "TG-142"},
		{halfmark.QLightOffset, halfmark.KindMonthly, "Y1", false, 2, "coincidence"},
		{halfmark.QLightOffset, halfmark.KindAnnual, "Y1", true, 1, "coincidence"},
		{halfmark.QFieldSize, halfmark.KindMorning, "X1+X2", false, 2, "collimator size"},
		{halfmark.QFieldSize, halfmark.KindMonthly, "X1+X2", true, 1, "asymmetric"},
		{halfmark.QPosition, halfmark.KindMonthly, "B1P23", false, 1, "leaf position"},
		{halfmark.QMLCBankMean, halfmark.KindMonthly, "B2", false, 0.5, "local choice"},
		{halfmark.QPenumbra, halfmark.KindMorning, "X1", false, 1, "local choice"},
	} {
		l, ok := b.Limits(c.q, c.kind, c.edge, c.asym)
		if !ok {
			t.Errorf("%s %s %s: no limit", c.q, c.kind, c.edge)
			continue
		}
		if l.ToleranceMM != c.tol || l.ActionMM < l.ToleranceMM || !strings.Contains(l.Source, c.src) {
			t.Errorf("%s %s %s asym=%v: %+v, want tolerance %v from %q", c.q, c.kind, c.edge, c.asym, l, c.tol, c.src)
		}
	}
}

func TestLoadTolerancesFile(t *testing.T) {
	dir := t.TempDir()
	good := "[[limit]]\nquantity = \"position\"\nkind = \"default\"\ntolerance_mm = 1.5\naction_mm = 2\nsource = \"local choice\"\n"
	p := filepath.Join(dir, "t.toml")
	if err := os.WriteFile(p, []byte(good), 0o644); err != nil {
		t.Fatal(err)
	}
	b, err := Load(p)
	if err != nil {
		t.Fatal(err)
	}
	// SHA-256 of the file's bytes as printed by coreutils `sha256sum t.toml`
	// (run outside Go on the same six lines).
	if b.IsShippedExample() || b.Source() != p || b.Hash() != "5f0938db896381db88bb941a5e7247218bbbd46714162e87db2ba21404a34fb8" {
		t.Errorf("book %q hash %q", b.Source(), b.Hash())
	}
	if l, ok := b.Limits(halfmark.QPosition, halfmark.KindMorning, "X1", false); !ok || l.ToleranceMM != 1.5 {
		t.Errorf("limits %+v %v", l, ok)
	}
	if _, ok := b.Limits(halfmark.QPenumbra, halfmark.KindMorning, "X1", false); ok {
		t.Error("a limit for penumbra, which the file does not set")
	}
	b2, err := Parse([]byte(good+"\n"), "x")
	if err != nil || b2.Hash() == b.Hash() {
		t.Errorf("a changed file keeps the hash (%v)", err)
	}
}

func TestTolerancesErrorsNameTheLine(t *testing.T) {
	entry := "[[limit]]\nquantity = \"position\"\nkind = \"default\"\ntolerance_mm = 2\naction_mm = 3\nsource = \"x\"\n"
	for _, c := range []struct {
		text, want string
	}{
		{"[[limit]]\nquantity = \"position\"\nkind = = \"x\"\n", "line 3"},
		{entry + "\n[[limit]]\nquantity = \"size\"\nkind = \"default\"\ntolerance_mm = 2\naction_mm = 3\nsource = \"x\"\n", "line 8: quantity \"size\" unknown"},
		{entry + "[[limit]]\nquantity = \"penumbra\"\nkind = \"weekly\"\ntolerance_mm = 2\naction_mm = 3\nsource = \"x\"\n", "line 7: kind \"weekly\""},
		{"# c\n" + strings.Replace(entry, "action_mm = 3", "action_mm = 1", 1), "line 2: action_mm = 1 must be at least"},
		{entry + entry, "line 7: repeats the entry of line 1"},
		{strings.Replace(entry, "source = \"x\"", "source = \"\"", 1), "line 1: source is missing"},
		{entry + "colour = 1\n", "unknown key"},
		{"", "no [[limit]]"},
	} {
		_, err := Parse([]byte(c.text), "t.toml")
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("error %v, want one containing %q", err, c.want)
		}
	}
}

// The [detection] table overrides the engine's defaults key by key; unknown
// keys are refused by name. [entry] sets the Level 2/3 instruction.
func TestDetectionAndEntryTables(t *testing.T) {
	entry := "[[limit]]\nquantity = \"position\"\nkind = \"default\"\ntolerance_mm = 2\naction_mm = 3\nsource = \"x\"\n"
	b, err := Parse([]byte(entry+"[detection]\ncusum_k = 0.75\n[entry]\nlevel_instruction = \"Call the physicist on duty.\"\n"), "t.toml")
	if err != nil {
		t.Fatal(err)
	}
	var d struct {
		CUSUMK float64 `toml:"cusum_k"`
		CUSUMH float64 `toml:"cusum_h"`
	}
	d.CUSUMH = 5
	if err := b.DecodeDetection(&d); err != nil || d.CUSUMK != 0.75 || d.CUSUMH != 5 {
		t.Errorf("decoded %+v, %v; want k 0.75 and the default h 5", d, err)
	}
	if b.Instruction() != "Call the physicist on duty." {
		t.Errorf("instruction %q", b.Instruction())
	}
	b, err = Parse([]byte(entry+"[detection]\ncusum_q = 1\n"), "t.toml")
	if err != nil {
		t.Fatal(err)
	}
	if err := b.DecodeDetection(&d); err == nil || !strings.Contains(err.Error(), "cusum_q") {
		t.Errorf("unknown detection key: %v", err)
	}
	if Shipped().Instruction() != DefaultInstruction {
		t.Errorf("shipped instruction %q", Shipped().Instruction())
	}
}
