package api_test

import (
	"math"
	"testing"

	"halfmark"
)

// GET /api/v1/checks lists each check with its edges as recorded, and the
// isocentre position projected by 55.1 × 100 / (100 + 10) = 50.0909 mm
// (magnification by SAD/(SSD + d), common practice; physics.md).
func TestListChecksCarriesEdges(t *testing.T) {
	e := newEnv(t)
	e.mustDo("POST", "/api/v1/checks", halfmark.RoleTherapist, e.checkBody("", `[{"edge":"X1","position_mm":55.1,"penumbra_mm":3.2},
		{"edge":"X2","position_mm":-1.0}]`), 201, nil)
	var out struct{ Checks []storedCheck }
	e.mustDo("GET", "/api/v1/checks", halfmark.RoleTherapist, "", 200, &out)
	if len(out.Checks) != 1 || len(out.Checks[0].Edges) != 2 {
		t.Fatalf("listing %+v", out.Checks)
	}
	x1 := out.Checks[0].Edges[0]
	if x1.Edge != "X1" || x1.PositionMM != 55.1 || math.Abs(x1.IsoPositionMM-50.0909) > 1e-4 {
		t.Errorf("X1 as listed: %+v", x1)
	}
}
