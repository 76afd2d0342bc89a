package web

import (
	"encoding/json"
	"reflect"
	"testing"

	"halfmark"
)

// Whatever an analysis result carries as warnings and as "…_used" blocks
// reaches the page unchanged, keys sorted.
func TestResultExtras(t *testing.T) {
	analysis := json.RawMessage(`{"x1_mm": 50, "warnings": ["edge tilted 1.2°", "SID missing: 1000 mm assumed"],
		"geometry_used": {"sid_mm": 1000, "sid_source": "assumed", "pixel_mm": null, "axes": ["X", "Y"]},
		"penumbra_mm": {"X1": 3}}`)
	w, blocks := resultExtras(analysis)
	if want := []string{"edge tilted 1.2°", "SID missing: 1000 mm assumed"}; !reflect.DeepEqual(w, want) {
		t.Errorf("warnings %q; want %q", w, want)
	}
	want := []resultBlock{{Name: "geometry_used", Rows: []resultRow{{"axes", `["X","Y"]`}, {"pixel_mm", "—"}, {"sid_mm", "1000"}, {"sid_source", "assumed"}}}}
	if !reflect.DeepEqual(blocks, want) {
		t.Errorf("blocks %+v; want %+v", blocks, want)
	}
}

// Provenance says what was uploaded; a check computed from a file that
// was not kept is never called typed.
func TestProvenance(t *testing.T) {
	picket := halfmark.Check{AnalysisVersion: "v", Edges: []halfmark.EdgeResult{{Edge: "B1P1"}}}
	for _, c := range []struct {
		c    halfmark.Check
		raw  []halfmark.RawData
		want string
	}{
		{halfmark.Check{}, nil, "typed"},
		{picket, nil, "image, not kept"},
		{halfmark.Check{AnalysisVersion: "v", Device: "EPID", Edges: []halfmark.EdgeResult{{Edge: "X1"}}}, nil, "image, not kept"},
		{halfmark.Check{AnalysisVersion: "v", Edges: []halfmark.EdgeResult{{Edge: "X1"}}}, nil, "file, not kept"},
		{picket, []halfmark.RawData{{Kind: halfmark.RawPicket, Filename: "pf.dcm"}}, "image pf.dcm"},
		{halfmark.Check{}, []halfmark.RawData{{Kind: halfmark.RawProfile, Filename: "x.csv"}}, "profile x.csv"},
	} {
		if got := provenance(c.c, c.raw); got != c.want {
			t.Errorf("provenance(%+v, %v) = %q; want %q", c.c, c.raw, got, c.want)
		}
	}
}
