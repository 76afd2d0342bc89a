package epid

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom/pkg/tag"

	"halfmark/analysis/epid/synth"
)

// The images in this file are rendered straight from the RT Image module's
// definitions (synth.Placement, an analytic model with known jaws), written
// with the DICOM library's own writer, decoded and measured. Sources of the
// definitions, checked in the copies named:
//
//   - RTImagePosition (3002,0012): "the x and y coordinates (in mm) of the
//     upper left hand corner of the image, in the IEC X-RAY IMAGE RECEPTOR
//     coordinate system" — PS3.3 C.8.8.2, as quoted in 3D Slicer's SlicerRT
//     sources (secondary); "centre of the first pixel" from memory.
//   - XRayImageReceptorTranslation (3002,000D): "position in (x,y,z)
//     coordinates of origin of IEC X-RAY IMAGE RECEPTOR System in the IEC
//     GANTRY coordinate system (mm)" — PS3.3 C.8.8.2, as quoted in a public
//     RT Image reader (secondary); VM 3 in the PS3.6 dictionary (seen in
//     several toolkits' dictionaries).
//   - RTImageOrientation (3002,0010): direction cosines of the first row and
//     the first column in the IEC X-RAY IMAGE RECEPTOR system, VM 6 (VM seen
//     in the dictionaries; the wording from memory).
//   - IEC 61217 rotations: θr of the receptor "counter-clockwise ... as
//     viewed from the RADIATION SOURCE" (IEC 61217 §2.6 as quoted in the RTK
//     geometry documentation, secondary); θb of the beam limiting device by
//     the same rule (from memory, not confirmed in a primary copy).

// placedImager is the test imager with the field rendered through p.
func placedDICOM(t *testing.T, pix []float64, p synth.Placement, omit ...tag.Tag) []byte {
	t.Helper()
	set := p.Tags()
	om := map[tag.Tag]bool{}
	for _, o := range omit {
		om[o] = true
	}
	b, err := synth.RTImage{Imager: testImager, Frames: [][]float64{pix}, Set: set, Omit: om}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func placedField(t *testing.T, f synth.Field, p synth.Placement, o DecodeOptions, omit ...tag.Tag) FieldResult {
	t.Helper()
	im, err := decode(t, placedDICOM(t, f.PixelsPlaced(testImager, p), p, omit...), o)
	if err != nil {
		t.Fatal(err)
	}
	r, err := AnalyzeField(im, FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func asymField() synth.Field {
	return synth.Field{X1: 30, X2: 70, Y1: 40, Y2: 60, Sigma: 1.5, Bg: 800, Amp: 30000}
}

func checkJaws(t *testing.T, what string, r FieldResult, f synth.Field, tol float64) {
	t.Helper()
	near(t, what+" x1_mm", r.X1MM, f.X1, tol)
	near(t, what+" x2_mm", r.X2MM, f.X2, tol)
	near(t, what+" y1_mm", r.Y1MM, f.Y1, tol)
	near(t, what+" y2_mm", r.Y2MM, f.Y2, tol)
	for _, e := range []string{EdgeX1, EdgeX2, EdgeY1, EdgeY2} {
		near(t, what+" penumbra "+e, r.PenumbraMM[e], penumbraErf(f.Sigma), 0.1)
	}
}

func TestPlacementTranslatedImager(t *testing.T) {
	// The imager's origin sits at (Tx, Ty) in the gantry system, so the beam
	// axis is at receptor (−Tx, −Ty) (PS3.3 C.8.8.2, XRayImageReceptorTranslation).
	// Tz = SAD − SID = −500 mm puts the receptor plane at SID (IEC GANTRY z
	// points to the source; common practice).
	f := asymField()
	for _, tr := range [][2]float64{{20, -15}, {-20, 15}, {20, 15}, {-20, -15}} {
		t.Run(fmt.Sprintf("%g,%g", tr[0], tr[1]), func(t *testing.T) {
			p := synth.DefaultPlacement(testImager)
			p.TranslationMM = [3]float64{tr[0], tr[1], testSAD - testSID}
			r := placedField(t, f, p, DecodeOptions{})
			checkJaws(t, "translated", r, f, 0.1)
			t.Logf("X1 %+.4f X2 %+.4f Y1 %+.4f Y2 %+.4f mm from the model", r.X1MM-f.X1, r.X2MM-f.X2, r.Y1MM-f.Y1, r.Y2MM-f.Y2)
			if r.Geometry == nil || r.Geometry.AxisSource != "RTImagePosition + XRayImageReceptorTranslation" ||
				!slices.Equal(r.Geometry.ReceptorTranslationMM, []float64{tr[0], tr[1], testSAD - testSID}) {
				t.Errorf("geometry_used %+v", r.Geometry)
			}
			// Without the translation the axis would be taken at the imager
			// origin, Tx, Ty away from the true axis: X2 and Y2 shrink by the
			// translation scaled to the isocentre, T·SAD/SID (derived), the
			// error the translation removes.
			r = placedField(t, f, p, DecodeOptions{}, synth.TagXRayImageReceptorTranslation)
			s := testSAD / testSID
			near(t, "x2_mm, translation dropped", r.X2MM, f.X2-tr[0]*s, 0.1)
			near(t, "y2_mm, translation dropped", r.Y2MM, f.Y2-tr[1]*s, 0.1)
		})
	}
}

func TestPlacementCollimatorQuadrants(t *testing.T) {
	// For each quadrant the jaws are found under their own names, and moving
	// one jaw alone by +5 mm in the model moves only the edge of that name.
	// At 90° X2 lies at the top of the stored image and Y2 on its left; at
	// 180° they swap sides (IEC 61217 θb counter-clockwise seen from the
	// source; PS3.3 C.8.8.2 orientation).
	wantSides := map[int]map[string]string{
		0:   {EdgeX1: "left", EdgeX2: "right", EdgeY1: "bottom", EdgeY2: "top"},
		90:  {EdgeX1: "bottom", EdgeX2: "top", EdgeY1: "right", EdgeY2: "left"},
		180: {EdgeX1: "right", EdgeX2: "left", EdgeY1: "top", EdgeY2: "bottom"},
		270: {EdgeX1: "top", EdgeX2: "bottom", EdgeY1: "left", EdgeY2: "right"},
	}
	for _, q := range []int{0, 90, 180, 270} {
		t.Run(fmt.Sprint(q), func(t *testing.T) {
			p := synth.DefaultPlacement(testImager)
			p.CollimatorDeg = float64(q)
			base := asymField()
			r0 := placedField(t, base, p, DecodeOptions{})
			checkJaws(t, "base", r0, base, 0.1)
			t.Logf("X1 %+.4f X2 %+.4f Y1 %+.4f Y2 %+.4f mm from the model", r0.X1MM-base.X1, r0.X2MM-base.X2, r0.Y1MM-base.Y1, r0.Y2MM-base.Y2)
			if g := r0.Geometry; g == nil || g.NamesQuadrantDeg != q || !mapsEqual(g.Sides, wantSides[q]) {
				t.Errorf("geometry_used %+v, want quadrant %d sides %v", r0.Geometry, q, wantSides[q])
			}
			worst := 0.0
			defer func() {
				t.Logf("moving one jaw by 5 mm: worst departure from (5 for it, 0 for the others) %.4f mm", worst)
			}()
			for _, jaw := range []string{EdgeX1, EdgeX2, EdgeY1, EdgeY2} {
				f := base
				switch jaw {
				case EdgeX1:
					f.X1 += 5
				case EdgeX2:
					f.X2 += 5
				case EdgeY1:
					f.Y1 += 5
				case EdgeY2:
					f.Y2 += 5
				}
				r := placedField(t, f, p, DecodeOptions{})
				for _, e := range []string{EdgeX1, EdgeX2, EdgeY1, EdgeY2} {
					want := 0.0
					if e == jaw {
						want = 5
					}
					d := jawOf(r, e) - jawOf(r0, e)
					near(t, fmt.Sprintf("collimator %d°, %s moved: change of %s", q, jaw, e), d, want, 0.1)
					worst = math.Max(worst, math.Abs(d-want))
				}
			}
		})
	}
}

func mapsEqual(a, b map[string]string) bool {
	if len(a) != len(b) {
		return false
	}
	for k, v := range a {
		if b[k] != v {
			return false
		}
	}
	return true
}

func jawOf(r FieldResult, e string) float64 {
	return map[string]float64{EdgeX1: r.X1MM, EdgeX2: r.X2MM, EdgeY1: r.Y1MM, EdgeY2: r.Y2MM}[e]
}

func TestPlacementCollimatorOffQuadrant(t *testing.T) {
	f := asymField()
	p := synth.DefaultPlacement(testImager)
	p.CollimatorDeg = 93
	// 3° from 90°: names of 90°, edges perpendicular to themselves (the
	// model's jaw distances are perpendicular distances), and a warning.
	r := placedField(t, f, p, DecodeOptions{})
	checkJaws(t, "93°", r, f, 0.15)
	if !strings.Contains(strings.Join(r.Warnings, ";"), "3.0° from 90°") {
		t.Errorf("warnings %q do not say the names follow 90°", r.Warnings)
	}
	// 10° from 90°: refused, naming the attribute.
	p.CollimatorDeg = 100
	_, err := decode(t, placedDICOM(t, f.PixelsPlaced(testImager, p), p), DecodeOptions{})
	wantTagError(t, "collimator 100°", err, "BeamLimitingDeviceAngle")
}

func TestPlacementFlippedOrientations(t *testing.T) {
	// RTImageOrientation other than the default but axis-aligned: the image
	// is remapped and the jaws keep their names (PS3.3 C.8.8.2). Each
	// placement puts the first pixel at the corner its directions imply, so
	// the image stays centred on the axis.
	g := testImager
	hw, hh := float64(g.Cols-1)/2*g.SpacingMM, float64(g.Rows-1)/2*g.SpacingMM
	f := asymField()
	for _, c := range []struct {
		name         string
		row, col     [2]float64
		pos          [2]float64
		sideX2, side string
	}{
		{"columns reversed", [2]float64{-1, 0}, [2]float64{0, -1}, [2]float64{hw, hh}, "left", "top"},
		{"rows reversed", [2]float64{1, 0}, [2]float64{0, 1}, [2]float64{-hw, -hh}, "right", "bottom"},
		// Rows along +y, columns along +x: the 1024 stored columns span y.
		{"transposed", [2]float64{0, 1}, [2]float64{1, 0}, [2]float64{-hh, -hw}, "bottom", "right"},
	} {
		t.Run(c.name, func(t *testing.T) {
			p := synth.Placement{PositionMM: c.pos, RowDir: c.row, ColDir: c.col, TranslationMM: [3]float64{20, -15, testSAD - testSID}}
			r := placedField(t, f, p, DecodeOptions{})
			checkJaws(t, c.name, r, f, 0.1)
			t.Logf("X1 %+.4f X2 %+.4f Y1 %+.4f Y2 %+.4f mm from the model", r.X1MM-f.X1, r.X2MM-f.X2, r.Y1MM-f.Y1, r.Y2MM-f.Y2)
			if r.Geometry == nil || r.Geometry.Sides[EdgeX2] != c.sideX2 || r.Geometry.Sides[EdgeY2] != c.side {
				t.Errorf("sides %v, want X2 %s, Y2 %s", r.Geometry.Sides, c.sideX2, c.side)
			}
		})
	}
}

func wantTagError(t *testing.T, what string, err error, keyword string) {
	t.Helper()
	var te *TagError
	if err == nil || !errors.As(err, &te) || te.Keyword != keyword || !strings.Contains(err.Error(), keyword) {
		t.Errorf("%s: error %v, want one naming %s", what, err, keyword)
	}
}

func TestPlacementRefused(t *testing.T) {
	// Every geometry that cannot be named with certainty is refused with an
	// error naming the attribute to check.
	pix := asymField().PixelsPlaced(testImager, synth.DefaultPlacement(testImager))
	cases := []struct {
		name    string
		set     map[tag.Tag]any
		omit    []tag.Tag
		keyword string
	}{
		{"orientation turned 45°", map[tag.Tag]any{synth.TagRTImageOrientation: ds("0.7071", "0.7071", "0", "0.7071", "-0.7071", "0")}, nil, "RTImageOrientation"},
		{"orientation out of plane", map[tag.Tag]any{synth.TagRTImageOrientation: ds("1", "0", "0", "0", "0", "-1")}, nil, "RTImageOrientation"},
		{"orientation rows parallel to columns", map[tag.Tag]any{synth.TagRTImageOrientation: ds("1", "0", "0", "1", "0", "0")}, nil, "RTImageOrientation"},
		{"orientation with 5 values", map[tag.Tag]any{synth.TagRTImageOrientation: ds("1", "0", "0", "0", "-1")}, nil, "RTImageOrientation"},
		{"receptor angle 0.5°", map[tag.Tag]any{synth.TagXRayImageReceptorAngle: ds("0.5")}, nil, "XRayImageReceptorAngle"},
		{"receptor angle 90°", map[tag.Tag]any{synth.TagXRayImageReceptorAngle: ds("90")}, nil, "XRayImageReceptorAngle"},
		{"NON_NORMAL plane", map[tag.Tag]any{synth.TagRTImagePlane: ds("NON_NORMAL")}, nil, "RTImagePlane"},
		{"collimator 45°", map[tag.Tag]any{synth.TagBeamLimitingDevAngle: ds("45")}, nil, "BeamLimitingDeviceAngle"},
		{"translation without position", map[tag.Tag]any{synth.TagXRayImageReceptorTranslation: ds("20", "-15", "-500")},
			[]tag.Tag{synth.TagRTImagePosition}, "RTImagePosition"},
		{"translation with 2 values", map[tag.Tag]any{synth.TagXRayImageReceptorTranslation: ds("20", "-15")}, nil, "XRayImageReceptorTranslation"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := synth.DefaultPlacement(testImager)
			set := p.Tags()
			for k, v := range c.set {
				set[k] = v
			}
			om := map[tag.Tag]bool{}
			for _, o := range c.omit {
				om[o] = true
			}
			b, err := synth.RTImage{Imager: testImager, Frames: [][]float64{pix}, Set: set, Omit: om}.Bytes()
			if err != nil {
				t.Fatal(err)
			}
			_, err = decode(t, b, DecodeOptions{})
			wantTagError(t, c.name, err, c.keyword)
		})
	}
	// A receptor angle within 0.1° is accepted.
	p := synth.DefaultPlacement(testImager)
	set := p.Tags()
	set[synth.TagXRayImageReceptorAngle] = ds("0.05")
	b, _ := synth.RTImage{Imager: testImager, Frames: [][]float64{pix}, Set: set}.Bytes()
	if _, err := decode(t, b, DecodeOptions{}); err != nil {
		t.Errorf("receptor angle 0.05°: %v", err)
	}
}

func TestPlacementMissingCollimator(t *testing.T) {
	// The angle absent: names assume 0° and every result says so; supplied
	// by the caller, the names follow it.
	f := asymField()
	p := synth.DefaultPlacement(testImager)
	p.CollimatorDeg = 90
	r := placedField(t, f, p, DecodeOptions{}, synth.TagBeamLimitingDevAngle)
	if !strings.Contains(strings.Join(r.Warnings, ";"), "collimator angle unknown") || r.Geometry.CollimatorDeg != nil ||
		!strings.HasPrefix(r.Geometry.CollimatorSource, "missing") {
		t.Errorf("missing angle: warnings %q, geometry %+v", r.Warnings, r.Geometry)
	}
	c := 90.0
	r = placedField(t, f, p, DecodeOptions{CollimatorDeg: &c}, synth.TagBeamLimitingDevAngle)
	checkJaws(t, "collimator supplied", r, f, 0.1)
	if strings.Contains(strings.Join(r.Warnings, ";"), "collimator angle unknown") || r.CollimatorDeg == nil || *r.CollimatorDeg != 90 {
		t.Errorf("supplied angle: warnings %q, collimator %v", r.Warnings, r.CollimatorDeg)
	}
}

func TestPlacementIsocentreSpacingKeepsImagerPositions(t *testing.T) {
	// With only PixelSpacing (isocentre plane) and no SID/SAD, the
	// imager-plane RTImagePosition cannot be turned into pixels: it must not
	// be divided by the isocentre spacing. The axis falls back to the image
	// centre with a warning. With SID and SAD known the spacing is carried
	// back to the imager plane and the position is used.
	f := asymField()
	p := synth.DefaultPlacement(testImager)
	p.TranslationMM = [3]float64{20, -15, testSAD - testSID}
	pix := f.PixelsPlaced(testImager, p)
	set := p.Tags()
	set[tag.PixelSpacing] = ds(fmt.Sprint(testIsoPix), fmt.Sprint(testIsoPix))
	om := map[tag.Tag]bool{synth.TagImagePlanePixelSpacing: true, synth.TagRTImageSID: true, synth.TagRadiationMachineSAD: true}
	b, err := synth.RTImage{Imager: testImager, Frames: [][]float64{pix}, Set: set, Omit: om}.Bytes()
	if err != nil {
		t.Fatal(err)
	}
	im, err := decode(t, b, DecodeOptions{PixelSpacingAtIso: true})
	if err != nil {
		t.Fatal(err)
	}
	if im.HasAxis || !strings.Contains(strings.Join(im.Warnings, ";"), "only the isocentre-plane PixelSpacing") {
		t.Errorf("iso spacing without SID/SAD: hasAxis %v (row %.1f col %.1f), warnings %q", im.HasAxis, im.AxisRow, im.AxisCol, im.Warnings)
	}
	im, err = decode(t, b, DecodeOptions{PixelSpacingAtIso: true, SIDmm: testSID, SADmm: testSAD})
	if err != nil {
		t.Fatal(err)
	}
	r, err := AnalyzeField(im, FieldOptions{})
	if err != nil {
		t.Fatal(err)
	}
	checkJaws(t, "iso spacing with SID/SAD", r, f, 0.1)
}

func TestPlacementPicketQuadrants(t *testing.T) {
	// A picket fence at each collimator quadrant: bank 1 of pair 30 opened
	// by 0.8 mm at the 0 mm picket is found under that bank and pair (MLC
	// leaves travel along X of the beam limiting device, bank 1 on the X1
	// side, pair 1 on the Y2 side).
	k := synth.Picket{LeafWidthsMM: Layout60.WidthsMM, Pickets: []float64{-60, -30, 0, 30, 60}, Width: 3, Sigma: 1, YJaw: 90,
		Bg: 500, Amp: 20000, Err1: map[[2]int]float64{{30, 2}: 0.8}}
	for _, q := range []int{0, 90, 180, 270} {
		t.Run(fmt.Sprint(q), func(t *testing.T) {
			p := synth.DefaultPlacement(testImager)
			p.CollimatorDeg = float64(q)
			im, err := decode(t, placedDICOM(t, k.PixelsPlaced(testImager, p), p), DecodeOptions{})
			if err != nil {
				t.Fatal(err)
			}
			r, err := AnalyzePicketFence(im, basePicketOpts)
			if err != nil {
				t.Fatal(err)
			}
			if got := exceedKeys(r); !slices.Equal(got, []leafKey{{1, 30, 0}}) {
				t.Errorf("exceeding %v, want bank 1 pair 30 at 0 mm", got)
			}
			l, _ := findLeaf(r, 1, 30, 0)
			near(t, "bank 1 pair 30 error_mm", l.ErrorMM, 0.8, 0.1)
			if r.Geometry == nil || r.Geometry.NamesQuadrantDeg != q {
				t.Errorf("geometry_used %+v", r.Geometry)
			}
			if math.Abs(r.MaxAbsErrorMM-0.8) > 0.1 {
				t.Errorf("max_abs_error_mm %.3f", r.MaxAbsErrorMM)
			}
		})
	}
}
