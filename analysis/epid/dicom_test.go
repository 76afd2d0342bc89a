package epid

import (
	"bytes"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"
	"github.com/suyashkumar/dicom/pkg/uid"
)

func tenByTen() fieldSpec {
	return fieldSpec{X1: 50, X2: 50, Y1: 50, Y2: 50, Sigma: 1.5, Bg: 800, Amp: 30000}
}

func decode(t *testing.T, b []byte, o DecodeOptions) (Image, error) {
	t.Helper()
	return DecodeDICOM(bytes.NewReader(b), int64(len(b)), o)
}

func TestDecodeRTImageGeometry(t *testing.T) {
	pix := tenByTen().pixels()
	for _, ts := range []string{uid.ExplicitVRLittleEndian, uid.ImplicitVRLittleEndian, uid.ExplicitVRBigEndian} {
		t.Run(ts, func(t *testing.T) {
			d := newDCM(pix)
			d.ts = ts
			d.set[tagGantryAngle] = ds("90")
			d.set[tagBeamLimitingDevAngle] = ds("0")
			im, err := decode(t, d.bytes(t), DecodeOptions{})
			if err != nil {
				t.Fatal(err)
			}
			if im.Rows != testRows || im.Cols != testCols || im.Inverted || im.HasAxis {
				t.Fatalf("decoded %d×%d inverted=%v hasAxis=%v", im.Rows, im.Cols, im.Inverted, im.HasAxis)
			}
			// Pixel size at the isocentre: 0.392·1000/1500 = 0.2613 mm (physics.md, DICOM RT Image section).
			x, y := im.PixelSizeIsoMM()
			near(t, "iso pixel x", x, 0.2613, 0.00005)
			near(t, "iso pixel y", y, 0.2613, 0.00005)
			if im.GantryDeg == nil || *im.GantryDeg != 90 || im.CollimatorDeg == nil || *im.CollimatorDeg != 0 {
				t.Errorf("angles gantry %v collimator %v, want 90 and 0", im.GantryDeg, im.CollimatorDeg)
			}
			// The stored values come back as written (rounded to uint16 by the writer).
			for _, i := range []int{0, 1234, testRows*testCols/2 + testCols/2, len(pix) - 1} {
				if want := math.Round(pix[i]); im.Pix[i] != want {
					t.Errorf("pixel %d = %g, want %g", i, im.Pix[i], want)
				}
			}
		})
	}
}

func TestDecodeAnglesInExposureSequence(t *testing.T) {
	d := newDCM(tenByTen().pixels())
	d.omit[tagGantryAngle] = true
	d.omit[tagBeamLimitingDevAngle] = true
	d.exposure = []*dicom.Element{
		mustElement(t, tagGantryAngle, ds("180")),
		mustElement(t, tagBeamLimitingDevAngle, ds("5")),
	}
	im, err := decode(t, d.bytes(t), DecodeOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if im.GantryDeg == nil || *im.GantryDeg != 180 || im.CollimatorDeg == nil || *im.CollimatorDeg != 5 {
		t.Fatalf("angles from ExposureSequence: gantry %v collimator %v, want 180 and 5", im.GantryDeg, im.CollimatorDeg)
	}
}

func TestDecodeImagePositionAxis(t *testing.T) {
	// RTImagePosition is the position of the first pixel in the RT Image
	// plane, whose origin is on the beam axis and whose y points up the image
	// (PS3.3 C.8.8.2, from memory): an axis at row 400, column 530 gives
	// x = −530·0.392, y = +400·0.392.
	d := newDCM(tenByTen().pixels())
	d.set[tagRTImagePosition] = ds("-207.76", "156.8")
	im, err := decode(t, d.bytes(t), DecodeOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if !im.HasAxis {
		t.Fatal("axis from RTImagePosition not used")
	}
	near(t, "axis row", im.AxisRow, 400, 1e-9)
	near(t, "axis col", im.AxisCol, 530, 1e-9)
	im, err = decode(t, d.bytes(t), DecodeOptions{IgnoreImagePosition: true})
	if err != nil || im.HasAxis {
		t.Fatalf("IgnoreImagePosition: hasAxis=%v err=%v", im.HasAxis, err)
	}
}

func TestDecodeMissingTags(t *testing.T) {
	pix := tenByTen().pixels()
	cases := []struct {
		omit     tag.Tag
		keyword  string
		number   string
		override DecodeOptions
	}{
		{tagRTImageSID, "RTImageSID", "(3002,0026)", DecodeOptions{SIDmm: 1500}},
		{tagRadiationMachineSAD, "RadiationMachineSAD", "(3002,0022)", DecodeOptions{SADmm: 1000}},
		{tagImagePlanePixelSpacing, "ImagePlanePixelSpacing", "(3002,0011)", DecodeOptions{PixelSpacingMM: [2]float64{0.392, 0.392}}},
	}
	for _, c := range cases {
		t.Run(c.keyword, func(t *testing.T) {
			d := newDCM(pix)
			d.omit[c.omit] = true
			b := d.bytes(t)
			_, err := decode(t, b, DecodeOptions{})
			if !errors.Is(err, ErrMissingTag) {
				t.Fatalf("error %v, want ErrMissingTag", err)
			}
			var te *TagError
			if !errors.As(err, &te) || te.Keyword != c.keyword {
				t.Fatalf("TagError %+v, want keyword %s", te, c.keyword)
			}
			if !strings.Contains(err.Error(), c.keyword+" "+c.number) {
				t.Errorf("message %q does not name %s %s", err, c.keyword, c.number)
			}
			im, err := decode(t, b, c.override)
			if err != nil {
				t.Fatalf("with override: %v", err)
			}
			x, _ := im.PixelSizeIsoMM()
			near(t, "iso pixel with override", x, testIsoPix, 1e-9)
		})
	}
	t.Run("all three", func(t *testing.T) {
		d := newDCM(pix)
		d.omit[tagRTImageSID], d.omit[tagRadiationMachineSAD], d.omit[tagImagePlanePixelSpacing] = true, true, true
		_, err := decode(t, d.bytes(t), DecodeOptions{})
		for _, kw := range []string{"RTImageSID (3002,0026)", "RadiationMachineSAD (3002,0022)", "ImagePlanePixelSpacing (3002,0011)"} {
			if err == nil || !strings.Contains(err.Error(), kw) {
				t.Errorf("error %v does not name %s", err, kw)
			}
		}
	})
	t.Run("Rows", func(t *testing.T) {
		d := newDCM(pix)
		b := d.bytes(t)
		d.omit[tag.Rows] = true
		// The library cannot write pixel data without Rows, so drop it after writing.
		ds, err := dicom.Parse(bytes.NewReader(b), int64(len(b)), nil)
		if err != nil {
			t.Fatal(err)
		}
		var kept []*dicom.Element
		for _, e := range ds.Elements {
			if e.Tag != tag.Rows {
				kept = append(kept, e)
			}
		}
		var buf bytes.Buffer
		if err := dicom.Write(&buf, dicom.Dataset{Elements: kept}); err != nil {
			t.Fatal(err)
		}
		_, err = decode(t, buf.Bytes(), DecodeOptions{})
		if !errors.Is(err, ErrMissingTag) || !strings.Contains(err.Error(), "Rows (0028,0010)") {
			t.Fatalf("error %v, want missing Rows (0028,0010)", err)
		}
	})
}

func TestDecodePixelSpacingFallback(t *testing.T) {
	d := newDCM(tenByTen().pixels())
	d.omit[tagImagePlanePixelSpacing] = true
	d.set[tag.PixelSpacing] = ds("0.2613", "0.2613")
	b := d.bytes(t)
	_, err := decode(t, b, DecodeOptions{})
	if !errors.Is(err, ErrMissingTag) || !strings.Contains(err.Error(), "PixelSpacingAtIso") {
		t.Fatalf("without the option: %v; want a missing-tag error pointing to PixelSpacingAtIso", err)
	}
	im, err := decode(t, b, DecodeOptions{PixelSpacingAtIso: true})
	if err != nil {
		t.Fatal(err)
	}
	// PixelSpacing is taken at the isocentre: the iso pixel is 0.2613 mm as given.
	x, y := im.PixelSizeIsoMM()
	near(t, "iso pixel x", x, 0.2613, 1e-9)
	near(t, "iso pixel y", y, 0.2613, 1e-9)
	if len(im.Warnings) == 0 || !strings.Contains(strings.Join(im.Warnings, ";"), "PixelSpacing (0028,0030)") {
		t.Errorf("warnings %q do not record the PixelSpacing fallback", im.Warnings)
	}
}

func TestDecodeUnsupported(t *testing.T) {
	pix := tenByTen().pixels()
	t.Run("compressed transfer syntax", func(t *testing.T) {
		d := newDCM(pix)
		d.ts = "1.2.840.10008.1.2.4.50" // JPEG Baseline (PS3.6 registry of UIDs)
		_, err := decode(t, d.bytes(t), DecodeOptions{})
		if !errors.Is(err, ErrUnsupported) || !strings.Contains(err.Error(), "JPEG") {
			t.Fatalf("error %v, want ErrUnsupported naming JPEG", err)
		}
	})
	t.Run("colour", func(t *testing.T) {
		d := newDCM(pix)
		d.set[tag.SamplesPerPixel] = []int{3}
		d.photometric = "RGB"
		_, err := decode(t, d.bytes(t), DecodeOptions{})
		if !errors.Is(err, ErrUnsupported) || !strings.Contains(err.Error(), "greyscale") {
			t.Fatalf("error %v, want ErrUnsupported about greyscale", err)
		}
	})
	t.Run("not DICOM", func(t *testing.T) {
		_, err := decode(t, []byte("this is a text file, not an image"), DecodeOptions{})
		if !errors.Is(err, ErrNotDICOM) {
			t.Fatalf("error %v, want ErrNotDICOM", err)
		}
	})
	t.Run("truncated", func(t *testing.T) {
		b := newDCM(pix).bytes(t)
		for _, n := range []int{200, 400, len(b) / 2, len(b) - 1} {
			_, err := decode(t, b[:n], DecodeOptions{})
			if !errors.Is(err, ErrNotDICOM) && !errors.Is(err, ErrInvalidImage) {
				t.Errorf("truncated at %d: %v, want ErrNotDICOM or ErrInvalidImage", n, err)
			}
		}
	})
	t.Run("size above MaxBytes", func(t *testing.T) {
		b := newDCM(pix).bytes(t)
		_, err := decode(t, b, DecodeOptions{MaxBytes: 1000})
		if !errors.Is(err, ErrUnsupported) {
			t.Fatalf("error %v, want ErrUnsupported for a file above MaxBytes", err)
		}
	})
}

func TestDecodeMultiFrame(t *testing.T) {
	a := tenByTen().pixels()
	f := tenByTen()
	f.X2 = 70
	b := f.pixels()
	d := newDCM(a)
	d.frames = [][]float64{a, b}
	raw := d.bytes(t)
	im, err := decode(t, raw, DecodeOptions{Frame: 1})
	if err != nil {
		t.Fatal(err)
	}
	i := testRows/2*testCols + testCols/2 + int(math.Round(60/testIsoPix)) // 60 mm right of the axis: inside frame 1 only
	if im.Pix[i] != math.Round(b[i]) {
		t.Errorf("frame 1 pixel %g, want %g", im.Pix[i], math.Round(b[i]))
	}
	if !strings.Contains(strings.Join(im.Warnings, ";"), "2 frames") {
		t.Errorf("warnings %q do not mention the frame count", im.Warnings)
	}
	if _, err := decode(t, raw, DecodeOptions{Frame: 2}); !errors.Is(err, ErrInvalidOption) {
		t.Errorf("frame 2 of 2: %v, want ErrInvalidOption", err)
	}
}

// moduleTestdata returns the DICOM library's own test files (PET, MR, X-ray,
// CT multi-frame, deflated; described in its testdata/data_details.md).
func moduleTestdata(t *testing.T) []string {
	t.Helper()
	out, err := exec.Command("go", "list", "-m", "-f", "{{.Dir}}", "github.com/suyashkumar/dicom").Output()
	if err != nil {
		t.Skipf("cannot locate the dicom module: %v", err)
	}
	files, _ := filepath.Glob(filepath.Join(strings.TrimSpace(string(out)), "testdata", "*.dcm"))
	if len(files) == 0 {
		t.Skip("dicom module testdata not found")
	}
	return files
}

func TestModuleTestdata(t *testing.T) {
	for _, path := range moduleTestdata(t) {
		t.Run(filepath.Base(path), func(t *testing.T) {
			b, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			// None is an RT Image: a clear error naming what is missing.
			_, err = decode(t, b, DecodeOptions{})
			if err == nil {
				t.Fatal("non-RT image decoded without geometry")
			}
			if !errors.Is(err, ErrMissingTag) && !errors.Is(err, ErrUnsupported) {
				t.Fatalf("error %v, want ErrMissingTag or ErrUnsupported", err)
			}
			t.Logf("default options: %v", err)

			// With the geometry supplied, the image itself must decode to the
			// size the library's own parser reports.
			im, err := decode(t, b, DecodeOptions{SIDmm: 1500, SADmm: 1000, PixelSpacingMM: [2]float64{0.4, 0.4}})
			if errors.Is(err, ErrUnsupported) {
				t.Logf("unsupported: %v", err)
				return
			}
			if err != nil {
				t.Fatalf("with geometry supplied: %v", err)
			}
			ref, err := dicom.ParseFile(path, nil)
			if err != nil {
				t.Fatal(err)
			}
			rows, _ := firstInt(&ref, tag.Rows)
			cols, _ := firstInt(&ref, tag.Columns)
			if im.Rows != rows || im.Cols != cols {
				t.Errorf("decoded %d×%d, library reports %d×%d", im.Rows, im.Cols, rows, cols)
			}
			// Analysis gives a result or an error, never a panic.
			if _, err := AnalyzeField(im, FieldOptions{}); err != nil {
				t.Logf("AnalyzeField: %v", err)
			}
		})
	}
}

func TestDecodeBadTagValues(t *testing.T) {
	pix := tenByTen().pixels()
	for _, c := range []struct {
		tg      tag.Tag
		val     []string
		keyword string
	}{
		{tagRTImageSID, ds("abc"), "RTImageSID"},
		{tagRadiationMachineSAD, ds("-1000"), "RadiationMachineSAD"},
		{tagImagePlanePixelSpacing, ds("0.392"), "ImagePlanePixelSpacing"},
		{tagImagePlanePixelSpacing, ds("0.392", "0"), "ImagePlanePixelSpacing"},
	} {
		d := newDCM(pix)
		d.set[c.tg] = c.val
		_, err := decode(t, d.bytes(t), DecodeOptions{})
		var te *TagError
		if !errors.As(err, &te) || te.Keyword != c.keyword || !errors.Is(err, ErrInvalidImage) {
			t.Errorf("%s = %q: %v, want a bad-%s error", c.keyword, c.val, err, c.keyword)
		}
	}
	// An RTImagePosition that puts the axis off the image is ignored with a warning.
	d := newDCM(pix)
	d.set[tagRTImagePosition] = ds("500", "500")
	im, err := decode(t, d.bytes(t), DecodeOptions{})
	if err != nil || im.HasAxis || !strings.Contains(strings.Join(im.Warnings, ";"), "outside the image") {
		t.Errorf("axis off the image: hasAxis=%v warnings=%q err=%v", im.HasAxis, im.Warnings, err)
	}
	if _, err := decode(t, newDCM(pix).bytes(t), DecodeOptions{SIDmm: -1}); !errors.Is(err, ErrInvalidOption) {
		t.Errorf("negative SID override: %v", err)
	}
}
