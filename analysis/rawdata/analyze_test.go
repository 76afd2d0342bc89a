package rawdata

import (
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"testing"

	"halfmark"
	"halfmark/analysis/epid"
	"halfmark/analysis/epid/synth"
)

// erfCSV is a profile with error-function edges at −left and +right (mm),
// blurred by sigma: its 50 % points are the geometric edges and its 80–20
// width is 2·Φ⁻¹(0.8)·σ = 1.6832·σ (normal quantile z(0.8) = 0.8416): an
// analytic check.
func erfCSV(left, right, sigma float64) []byte {
	var b strings.Builder
	b.WriteString("position_mm,signal\n")
	for x := -2 * math.Max(left, right); x <= 2*math.Max(left, right); x += 0.25 {
		fmt.Fprintf(&b, "%.3f,%.6f\n", x, 100*(synth.Phi((x+left)/sigma)-synth.Phi((x-right)/sigma)))
	}
	return []byte(b.String())
}

// A profile along Y: the low side is Y1 at −left_edge_mm, the high side Y2
// (IEC 61217 coordinates increase from Y1 toward Y2).
func TestAnalyzeProfileEdges(t *testing.T) {
	analysis, edges, err := Analyze(halfmark.RawProfile, erfCSV(40, 60, 2), json.RawMessage(`{"axis":"Y"}`))
	if err != nil {
		t.Fatal(err)
	}
	if len(edges) != 2 || edges[0].Edge != "Y1" || edges[1].Edge != "Y2" {
		t.Fatalf("edges %+v; want Y1, Y2", edges)
	}
	for i, want := range []float64{40, 60} {
		if math.Abs(edges[i].PositionMM-want) > 0.05 {
			t.Errorf("%s at %.3f mm; want %v", edges[i].Edge, edges[i].PositionMM, want)
		}
		if p := edges[i].PenumbraMM; p == nil || math.Abs(*p-1.6832*2) > 0.05 {
			t.Errorf("%s penumbra %v; want 3.366 mm", edges[i].Edge, p)
		}
	}
	var r struct {
		FieldSizeMM float64 `json:"field_size_mm"`
	}
	if err := json.Unmarshal(analysis, &r); err != nil || math.Abs(r.FieldSizeMM-100) > 0.1 {
		t.Errorf("analysis JSON field_size_mm = %v (%v); want 100", r.FieldSizeMM, err)
	}
	// No options: axis X.
	if _, edges, err := Analyze(halfmark.RawProfile, erfCSV(50, 50, 2), nil); err != nil || edges[0].Edge != "X1" {
		t.Errorf("default axis: %+v %v; want X1", edges, err)
	}
}

// Options are one shape for every caller: an unknown field is refused by
// name, so a stored document that Analyze cannot read fails loudly.
func TestAnalyzeRejectsBadInput(t *testing.T) {
	for _, c := range []struct {
		name    string
		kind    halfmark.RawKind
		data    []byte
		opts    string
		mention string
	}{
		{"unknown option", halfmark.RawProfile, erfCSV(50, 50, 2), `{"options":{}}`, `unknown field "options"`},
		{"bad axis", halfmark.RawProfile, erfCSV(50, 50, 2), `{"axis":"Z"}`, "use X (crossline) or Y (inline)"},
		{"unknown kind", "audio", nil, ``, "use profile, image or picket"},
		{"not DICOM", halfmark.RawImage, []byte("not an image"), ``, ""},
		{"bad layout", halfmark.RawPicket, []byte("x"), `{"layout":"7 leaves"}`, ""},
	} {
		_, _, err := Analyze(c.kind, c.data, json.RawMessage(c.opts))
		if err == nil || !strings.Contains(err.Error(), c.mention) {
			t.Errorf("%s: %v; want an error mentioning %q", c.name, err, c.mention)
		}
	}
	var big strings.Builder
	big.WriteString("position_mm,signal\n")
	for i := 0; i <= MaxProfileSamples; i++ {
		fmt.Fprintf(&big, "%d,1\n", i)
	}
	if _, err := Profile([]byte(big.String()), ProfileParams{}); err == nil || !strings.Contains(err.Error(), "resample") {
		t.Errorf("%d samples: %v; want the sample limit", MaxProfileSamples+1, err)
	}
}

// An RT Image of a known field (analysis/epid/synth, erf edges): the edge
// results carry the four jaws in the isocentre plane with a penumbra each.
func TestAnalyzeImageEdges(t *testing.T) {
	g := synth.Default
	ar, ac := g.Axis()
	img, err := synth.RTImage{Imager: g, Frames: [][]float64{synth.Field{X1: 45, X2: 55, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 100, Amp: 20000}.Pixels(g, ar, ac)}}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	_, edges, err := Analyze(halfmark.RawImage, img, json.RawMessage(`{}`))
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]float64{"X1": 45, "X2": 55, "Y1": 40, "Y2": 60}
	if len(edges) != 4 {
		t.Fatalf("edges %+v", edges)
	}
	for _, e := range edges {
		if math.Abs(e.PositionMM-want[e.Edge]) > 0.1 || e.PenumbraMM == nil {
			t.Errorf("%s at %.3f mm (penumbra %v); want %v", e.Edge, e.PositionMM, e.PenumbraMM, want[e.Edge])
		}
	}
}

// MLC edges from the picket nearest the axis, positive on their own side:
// bank 1 toward X1 (position = −x), bank 2 toward X2.
func TestPicketEdgesConvention(t *testing.T) {
	r := epid.PicketResult{Leaves: []epid.LeafResult{
		{Bank: 1, Pair: 3, PicketMM: -30, PositionMM: -31.5},
		{Bank: 1, Pair: 3, PicketMM: 0, PositionMM: -1.5},
		{Bank: 2, Pair: 3, PicketMM: 0, PositionMM: 1.4},
		{Bank: 2, Pair: 3, PicketMM: 30, PositionMM: 31.5},
	}}
	got := PicketEdges(r)
	if len(got) != 2 || got[0].Edge != "B1P3" || got[0].PositionMM != 1.5 || got[1].Edge != "B2P3" || got[1].PositionMM != 1.4 {
		t.Errorf("PicketEdges = %+v; want B1P3 1.5, B2P3 1.4 (central picket only)", got)
	}
	if PicketEdges(epid.PicketResult{}) != nil {
		t.Error("no leaves must give no edges")
	}
}

func TestParseListAndLayout(t *testing.T) {
	got, err := ParseList(" -60, -30,0,30 ,60,")
	if err != nil || fmt.Sprint(got) != "[-60 -30 0 30 60]" {
		t.Errorf("ParseList: %v %v", got, err)
	}
	if _, err := ParseList("1,NaN"); err == nil {
		t.Error("NaN accepted in a list")
	}
	if l, err := Layout(""); err != nil || l.Name != epid.Layout60.Name {
		t.Errorf("default layout %v %v; want the 60-pair layout", l.Name, err)
	}
	if l, err := Layout("80"); err != nil || l.Name != epid.Layout80.Name {
		t.Errorf("layout 80: %v %v", l.Name, err)
	}
}
