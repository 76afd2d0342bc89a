package epid

import (
	"bytes"
	"cmp"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/frame"
	"github.com/suyashkumar/dicom/pkg/tag"
	"github.com/suyashkumar/dicom/pkg/uid"
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
func phi(z float64) float64 { return 0.5 * math.Erfc(-z/math.Sqrt2) }

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
	th := f.RotDeg * math.Pi / 180
	cs, sn := math.Cos(th), math.Sin(th)
	pix := make([]float64, testRows*testCols)
	var rng *rand.Rand
	if f.Noise > 0 {
		rng = rand.New(rand.NewPCG(f.Seed, 0x5eed))
	}
	// Separable when not rotated: precompute the x and y factors.
	fx := make([]float64, testCols)
	fy := make([]float64, testRows)
	for c := range fx {
		x := (float64(c) - ac) * testIsoPix
		fx[c] = phi((x+f.X1)/f.Sigma) - phi((x-f.X2)/f.Sigma)
	}
	for r := range fy {
		y := (ar - float64(r)) * testIsoPix
		fy[r] = phi((y+f.Y1)/f.Sigma) - phi((y-f.Y2)/f.Sigma)
	}
	for r := range testRows {
		y := (ar - float64(r)) * testIsoPix
		for c := range testCols {
			var v float64
			if f.RotDeg == 0 {
				v = fx[c] * fy[r]
			} else {
				x := (float64(c) - ac) * testIsoPix
				xr, yr := x*cs+y*sn, -x*sn+y*cs
				v = (phi((xr+f.X1)/f.Sigma) - phi((xr-f.X2)/f.Sigma)) * (phi((yr+f.Y1)/f.Sigma) - phi((yr-f.Y2)/f.Sigma))
			}
			v = f.Bg + f.Amp*v
			if rng != nil {
				v += f.Noise * rng.NormFloat64()
			}
			pix[r*testCols+c] = v
		}
	}
	return pix
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
	ar, ac := float64(testRows-1)/2, float64(testCols-1)/2
	pix := make([]float64, testRows*testCols)
	var rng *rand.Rand
	if p.Noise > 0 {
		rng = rand.New(rand.NewPCG(p.Seed, 0xfe11ce))
	}
	total := p.Layout.TotalMM()
	tan := math.Tan(p.RotDeg * math.Pi / 180)
	cache := map[int][]float64{} // pair → x profile, when strips are not turned
	for r := range testRows {
		y := (ar - float64(r)) * testIsoPix
		// Leaf pair under this row (from the Y2 side).
		pair, top := 0, total/2
		for i, w := range p.Layout.WidthsMM {
			if y <= top && y > top-w {
				pair = i + 1
				break
			}
			top -= w
		}
		jaw := phi((y+p.YJaw)/p.Sigma) - phi((y-p.YJaw)/p.Sigma)
		prof := cache[pair]
		if prof == nil {
			prof = make([]float64, testCols)
			for c := range testCols {
				x := (float64(c) - ac) * testIsoPix
				v := 0.0
				if pair > 0 {
					for j, xc := range p.Pickets {
						xc += p.Shift - y*tan
						l := xc - p.Width/2 + p.Err1[[2]int{pair, j}]
						rr := xc + p.Width/2 + p.Err2[[2]int{pair, j}]
						v += phi((x-l)/p.Sigma) - phi((x-rr)/p.Sigma)
					}
				}
				prof[c] = v
			}
			if p.RotDeg == 0 {
				cache[pair] = prof
			}
		}
		for c := range testCols {
			v := p.Bg + p.Amp*prof[c]*jaw
			if rng != nil {
				v += p.Noise * rng.NormFloat64()
			}
			pix[r*testCols+c] = v
		}
	}
	return pix
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
	vals := map[tag.Tag]any{
		tag.MediaStorageSOPClassUID:    ds("1.2.840.10008.5.1.4.1.1.481.1"),
		tag.MediaStorageSOPInstanceUID: ds("1.2.826.0.1.3680043.2.1125.1"),
		tag.TransferSyntaxUID:          ds(d.ts),
		tag.SOPClassUID:                ds("1.2.840.10008.5.1.4.1.1.481.1"),
		tag.SOPInstanceUID:             ds("1.2.826.0.1.3680043.2.1125.1"),
		tag.Modality:                   ds("RTIMAGE"),
		tag.SamplesPerPixel:            []int{1},
		tag.PhotometricInterpretation:  ds(d.photometric),
		tag.Rows:                       []int{d.rows},
		tag.Columns:                    []int{d.cols},
		tag.BitsAllocated:              []int{16},
		tag.BitsStored:                 []int{16},
		tag.HighBit:                    []int{15},
		tag.PixelRepresentation:        []int{0},
		tagRTImagePlane:                ds("NORMAL"),
		tagImagePlanePixelSpacing:      ds("0.392", "0.392"),
		tagRadiationMachineSAD:         ds(strconv.FormatFloat(testSAD, 'f', -1, 64)),
		tagRTImageSID:                  ds(strconv.FormatFloat(testSID, 'f', -1, 64)),
		tagGantryAngle:                 ds("0"),
		tagBeamLimitingDevAngle:        ds("0"),
	}
	if len(d.frames) > 1 {
		vals[tag.NumberOfFrames] = ds(strconv.Itoa(len(d.frames)))
	}
	var frames []*frame.Frame
	for _, f := range d.frames {
		nf := frame.NewNativeFrame[uint16](16, d.rows, d.cols, d.rows*d.cols, 1)
		for i, v := range f {
			nf.RawData[i] = uint16(math.Max(0, math.Min(65535, math.Round(v))))
		}
		frames = append(frames, &frame.Frame{NativeData: nf})
	}
	vals[tag.PixelData] = dicom.PixelDataInfo{Frames: frames}
	if d.exposure != nil {
		vals[tagExposureSequence] = [][]*dicom.Element{d.exposure}
	}
	for k, v := range d.set {
		vals[k] = v
	}
	var elems []*dicom.Element
	for k, v := range vals {
		if d.omit[k] {
			continue
		}
		e, err := dicom.NewElement(k, v)
		if err != nil {
			t.Fatalf("NewElement %v: %v", k, err)
		}
		elems = append(elems, e)
	}
	slices.SortFunc(elems, func(a, b *dicom.Element) int {
		return cmp.Or(cmp.Compare(a.Tag.Group, b.Tag.Group), cmp.Compare(a.Tag.Element, b.Tag.Element))
	})
	return dicom.Dataset{Elements: elems}
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
