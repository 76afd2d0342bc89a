package epid

import (
	"bytes"
	"math"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"

	"github.com/suyashkumar/dicom/pkg/uid"
	"halfmark/analysis/epid/synth"
)

// Geometry of the synthetic images: an imager of 1024×768 pixels of 0.392 mm
// at SID 1500 mm on a machine with SAD 1000 mm, so a pixel is
// 0.392·1000/1500 = 0.2613 mm at the isocentre (physics.md, derived).
const (
	testRows    = 768
	testCols    = 1024
	testSID     = 1500.0
	testSAD     = 1000.0
	testSpacing = 0.392
	testIsoPix  = testSpacing * testSAD / testSID
)

// phi is the standard normal cumulative distribution Φ(z) = ½·erfc(−z/√2)
// (common practice; math.Erfc is the standard library's complementary error
// function).
func phi(z float64) float64 { return synth.Phi(z) }

var testImager = synth.Imager{Rows: testRows, Cols: testCols, SpacingMM: testSpacing, SIDmm: testSID, SADmm: testSAD}

// fieldSpec describes a synthetic open field: a rectangle with jaw distances
// X1, X2, Y1, Y2 (mm at the isocentre, from the axis) blurred by a Gaussian of
// width Sigma, rotated RotDeg counter-clockwise (as displayed) about the axis:
//
//	D(x, y) = Bg + Amp·[Φ((x'+X1)/σ) − Φ((x'−X2)/σ)]·[Φ((y'+Y1)/σ) − Φ((y'−Y2)/σ)]
//	x' = x·cosθ + y·sinθ,  y' = −x·sinθ + y·cosθ
//
// Each edge is an error-function edge, so its 50% point is the geometric edge
// and its 80–20 width is 2·0.8416·σ = 1.6832·σ (physics.md, derived), and the
// perpendicular distance from the axis to the X2 edge line is exactly X2.
type fieldSpec struct {
	X1, X2, Y1, Y2 float64
	Sigma          float64
	RotDeg         float64
	Bg, Amp        float64
	Noise          float64 // standard deviation of added Gaussian noise
	Seed           uint64
	AxisRow        float64 // pixel coordinates of the axis; 0 = image centre
	AxisCol        float64
}

func (f fieldSpec) axis() (float64, float64) {
	ar, ac := f.AxisRow, f.AxisCol
	if ar == 0 && ac == 0 {
		ar, ac = float64(testRows-1)/2, float64(testCols-1)/2
	}
	return ar, ac
}

// pixels renders the field on the test imager.
func (f fieldSpec) pixels() []float64 {
	ar, ac := f.axis()
	return synth.Field{X1: f.X1, X2: f.X2, Y1: f.Y1, Y2: f.Y2, Sigma: f.Sigma, RotDeg: f.RotDeg, Bg: f.Bg, Amp: f.Amp,
		Noise: f.Noise, Seed: f.Seed}.Pixels(testImager, ar, ac)
}

// image returns the field as an Image with the test geometry.
func (f fieldSpec) image() Image {
	ar, ac := f.axis()
	return Image{Rows: testRows, Cols: testCols, Pix: f.pixels(), RowSpacingMM: testSpacing, ColSpacingMM: testSpacing,
		SIDmm: testSID, SADmm: testSAD, AxisRow: ar, AxisCol: ac, HasAxis: f.AxisRow != 0 || f.AxisCol != 0}
}

// picketSpec describes a synthetic picket fence: for every leaf pair of
// Layout, at every picket centre x_j, an open strip between the bank 1 tip
// x_j − W/2 + e1 and the bank 2 tip x_j + W/2 + e2 (e1, e2 the injected
// errors of that pair), blurred along x by σ:
//
//	D = Bg + Amp·Σ_j [Φ((x − left)/σ) − Φ((x − right)/σ)]·J(y)
//
// J(y) = Φ((y+YJaw)/σ) − Φ((y−YJaw)/σ) is the Y-jaw window. The strip is
// symmetric about (left+right)/2, so its centre is exact at any level.
type picketSpec struct {
	Layout  LeafLayout
	Pickets []float64
	Width   float64
	Sigma   float64
	YJaw    float64
	Bg, Amp float64
	Noise   float64
	Seed    uint64
	Shift   float64            // global x shift of every strip, mm
	RotDeg  float64            // strips turned counter-clockwise: x shifts by −y·tanθ
	Err1    map[[2]int]float64 // {pair (from 1), picket (from 0)} → bank 1 tip error, mm
	Err2    map[[2]int]float64
}

func (p picketSpec) pixels() []float64 {
	return synth.Picket{LeafWidthsMM: p.Layout.WidthsMM, Pickets: p.Pickets, Width: p.Width, Sigma: p.Sigma, YJaw: p.YJaw,
		Bg: p.Bg, Amp: p.Amp, Noise: p.Noise, Seed: p.Seed, Shift: p.Shift, RotDeg: p.RotDeg, Err1: p.Err1, Err2: p.Err2}.Pixels(testImager)
}

func (p picketSpec) image() Image {
	return Image{Rows: testRows, Cols: testCols, Pix: p.pixels(), RowSpacingMM: testSpacing, ColSpacingMM: testSpacing,
		SIDmm: testSID, SADmm: testSAD}
}

// dcm builds a DICOM RT Image dataset with the library's own writer.
type dcm struct {
	rows, cols  int
	frames      [][]float64 // stored values per frame (rounded, clamped to uint16)
	photometric string
	ts          string
	omit        map[tag.Tag]bool
	set         map[tag.Tag]any // replaces or adds elements
	exposure    []*dicom.Element
}

func newDCM(pix []float64) *dcm {
	return &dcm{rows: testRows, cols: testCols, frames: [][]float64{pix}, photometric: "MONOCHROME2",
		ts: uid.ExplicitVRLittleEndian, omit: map[tag.Tag]bool{}, set: map[tag.Tag]any{}}
}

func ds(s ...string) []string { return s }

func (d *dcm) dataset(t testing.TB) dicom.Dataset {
	t.Helper()
	g := testImager
	g.Rows, g.Cols = d.rows, d.cols
	set, err := synth.RTImage{Imager: g, Frames: d.frames, Photometric: d.photometric, TransferUID: d.ts,
		Omit: d.omit, Set: d.set, Exposure: d.exposure}.Dataset()
	if err != nil {
		t.Fatal(err)
	}
	return set
}

func (d *dcm) bytes(t testing.TB) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := dicom.Write(&buf, d.dataset(t)); err != nil {
		t.Fatalf("dicom.Write: %v", err)
	}
	return buf.Bytes()
}

func mustElement(t testing.TB, tg tag.Tag, v any) *dicom.Element {
	t.Helper()
	e, err := dicom.NewElement(tg, v)
	if err != nil {
		t.Fatal(err)
	}
	return e
}

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if math.IsNaN(got) || math.Abs(got-want) > tol {
		t.Errorf("%s = %.4f, want %.4f ± %.3g", what, got, want, tol)
	}
}
