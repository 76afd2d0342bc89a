package analysis

import (
	"errors"
	"math"
	"strings"
	"testing"
)

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

func TestProjectToIsocentre(t *testing.T) {
	cases := []struct {
		name                     string
		x, sad, ssd, depth, want float64
	}{
		// x_iso = x·SAD/(SSD + d) (similar triangles; common practice).
		{"110 cm plane", 55, 100, 100, 10, 50},
		{"isocentre plane at depth", 42.5, 100, 90, 10, 42.5},
		{"negative position", -55, 100, 100, 10, -50},
		// DICOM PS3.3 C.8.8.2 (ImagePlanePixelSpacing is at the imager plane): 0.392 mm pixels at SID 1500 mm, SAD
		// 1000 mm → 0.2613 mm at the isocentre.
		{"EPID pixel", 0.392, 100, 150, 0, 0.2613},
	}
	for _, c := range cases {
		got, err := ProjectToIsocentre(c.x, c.sad, c.ssd, c.depth)
		if err != nil || !near(got, c.want, 1e-4) {
			t.Errorf("%s: got %g, %v; want %g", c.name, got, err, c.want)
		}
	}
}

func TestGeometryErrors(t *testing.T) {
	cases := []struct {
		name    string
		err     error
		mention string
	}{
		{"zero SAD", second(ProjectToIsocentre(1, 0, 100, 0)), "SAD is 0"},
		{"negative SSD", second(ProjectToIsocentre(1, 100, -100, 0)), "SSD is -100"},
		{"negative depth", second(ProjectToIsocentre(1, 100, 100, -1)), "depth is -1"},
		{"NaN position", second(ProjectToIsocentre(math.NaN(), 100, 100, 0)), "position is NaN"},
	}
	for _, c := range cases {
		if !errors.Is(c.err, ErrGeometry) || !strings.Contains(c.err.Error(), c.mention) {
			t.Errorf("%s: got %v, want ErrGeometry mentioning %q", c.name, c.err, c.mention)
		}
	}
}

func second[T any](_ T, err error) error { return err }
