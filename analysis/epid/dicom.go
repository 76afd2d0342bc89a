package epid

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"
)

// DecodeOptions supply or override what an RT Image may lack. Zero values
// mean "take it from the file".
type DecodeOptions struct {
	// SIDmm overrides RTImageSID (3002,0026), source-to-imager distance, mm.
	SIDmm float64
	// SADmm overrides RadiationMachineSAD (3002,0022), source-to-axis distance, mm.
	SADmm float64
	// PixelSpacingMM overrides ImagePlanePixelSpacing (3002,0011): {row
	// spacing, column spacing} in mm in the imager plane (row spacing first,
	// as in DICOM). Used when both are > 0.
	PixelSpacingMM [2]float64
	// PixelSpacingAtIso allows, when ImagePlanePixelSpacing is absent, the use
	// of PixelSpacing (0028,0030) instead. DICOM defines PixelSpacing as the
	// spacing "in the patient", so it is taken as the spacing in the isocentre
	// plane: no SAD/SID scaling is applied to it. A warning records the choice.
	PixelSpacingAtIso bool
	// Frame selects the frame (from 0) of a multi-frame image.
	Frame int
	// IgnoreImagePosition puts the central axis at the image centre even when
	// RTImagePosition (3002,0012) is present.
	IgnoreImagePosition bool
	// MaxBytes bounds the file size and the inflated size of a deflated data
	// set. Default 256 MiB.
	MaxBytes int64
	// CollimatorDeg supplies the collimator (beam limiting device) angle in
	// degrees, IEC 61217, when BeamLimitingDeviceAngle (300A,0120) is absent,
	// or overrides it (with a warning when they differ). nil: from the file.
	CollimatorDeg *float64
}

const defaultMaxBytes = 256 << 20

// DICOM attributes read by DecodeDICOM (PS3.6; numbers in physics.md).
var (
	tagRTImagePlane           = tag.Tag{Group: 0x3002, Element: 0x000C}
	tagReceptorTranslation    = tag.Tag{Group: 0x3002, Element: 0x000D}
	tagReceptorAngle          = tag.Tag{Group: 0x3002, Element: 0x000E}
	tagRTImageOrientation     = tag.Tag{Group: 0x3002, Element: 0x0010}
	tagImagePlanePixelSpacing = tag.Tag{Group: 0x3002, Element: 0x0011}
	tagRTImagePosition        = tag.Tag{Group: 0x3002, Element: 0x0012}
	tagRadiationMachineSAD    = tag.Tag{Group: 0x3002, Element: 0x0022}
	tagRTImageSID             = tag.Tag{Group: 0x3002, Element: 0x0026}
	tagExposureSequence       = tag.Tag{Group: 0x3002, Element: 0x0030}
	tagGantryAngle            = tag.Tag{Group: 0x300A, Element: 0x011E}
	tagBeamLimitingDevAngle   = tag.Tag{Group: 0x300A, Element: 0x0120}
)

// DecodeDICOM reads a DICOM RT Image of size bytes from r (size < 0: read to
// EOF) and returns it with its geometry: Pix holds the stored values of the
// chosen frame after the Modality LUT (RescaleSlope, RescaleIntercept).
//
// Geometry comes from RTImageSID (3002,0026), RadiationMachineSAD (3002,0022)
// and ImagePlanePixelSpacing (3002,0011, row spacing first), or from the
// overrides in o; a missing value gives an error wrapping ErrMissingTag that
// names each missing attribute (a *TagError per attribute, joined). The
// image is then placed in the beam-limiting-device frame by placeImage: the
// central axis from RTImagePosition (3002,0012) and
// XRayImageReceptorTranslation (3002,000D) (PS3.3 C.8.8.2), rows and columns
// remapped for RTImageOrientation (3002,0010) and the collimator quadrant,
// so that X1 is on the left and Y2 at the top of Image.Pix; Image.Geometry
// says what was used. Gantry and collimator angles come from GantryAngle
// (300A,011E) and BeamLimitingDeviceAngle (300A,0120), at the top level or
// in the first ExposureSequence (3002,0030) item (o.CollimatorDeg supplies
// or overrides the latter). PhotometricInterpretation MONOCHROME1 sets
// Image.Inverted. Geometry that cannot be named with certainty is refused
// with a *TagError naming the attribute (see placeImage).
//
// Compressed, encapsulated, colour and 1-bit images give ErrUnsupported;
// broken files give ErrNotDICOM. It never panics: the length fields are
// checked before parsing and a parser panic is turned into an error.
func DecodeDICOM(r io.Reader, size int64, o DecodeOptions) (Image, error) {
	maxBytes := o.MaxBytes
	if maxBytes <= 0 {
		maxBytes = defaultMaxBytes
	}
	if size > maxBytes {
		return Image{}, fmt.Errorf("%w: file is %d bytes, above the %d-byte limit; raise DecodeOptions.MaxBytes if it is genuine", ErrUnsupported, size, maxBytes)
	}
	var b []byte
	var err error
	if size >= 0 {
		b = make([]byte, size)
		_, err = io.ReadFull(r, b)
	} else {
		b, err = io.ReadAll(io.LimitReader(r, maxBytes+1))
		if err == nil && int64(len(b)) > maxBytes {
			return Image{}, fmt.Errorf("%w: file is larger than the %d-byte limit; raise DecodeOptions.MaxBytes if it is genuine", ErrUnsupported, maxBytes)
		}
	}
	if err != nil {
		return Image{}, fmt.Errorf("%w: reading %d bytes: %v", ErrNotDICOM, size, err)
	}
	return DecodeDICOMBytes(b, o)
}

// DecodeDICOMBytes is DecodeDICOM for a file already in memory.
func DecodeDICOMBytes(b []byte, o DecodeOptions) (Image, error) {
	if err := o.validate(); err != nil {
		return Image{}, err
	}
	maxBytes := o.MaxBytes
	if maxBytes <= 0 {
		maxBytes = defaultMaxBytes
	}
	syn, err := preflight(b, maxBytes)
	if err != nil {
		return Image{}, err
	}
	ds, err := parseGuarded(b)
	if err != nil {
		return Image{}, err
	}
	return imageFromDataset(&ds, syn, o)
}

func (o DecodeOptions) validate() error {
	bad := func(name string, v float64) error {
		return fmt.Errorf("%w: DecodeOptions.%s = %g; give a positive distance in mm or 0 to read it from the file", ErrInvalidOption, name, v)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"SIDmm", o.SIDmm}, {"SADmm", o.SADmm}, {"PixelSpacingMM[0]", o.PixelSpacingMM[0]}, {"PixelSpacingMM[1]", o.PixelSpacingMM[1]}} {
		if f.v < 0 || math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return bad(f.name, f.v)
		}
	}
	if c := o.CollimatorDeg; c != nil && (math.IsNaN(*c) || math.IsInf(*c, 0) || math.Abs(*c) > 720) {
		return fmt.Errorf("%w: DecodeOptions.CollimatorDeg = %g; give the collimator angle in degrees (0 to 360)", ErrInvalidOption, *c)
	}
	if o.Frame < 0 {
		return fmt.Errorf("%w: DecodeOptions.Frame = %d; frames count from 0", ErrInvalidOption, o.Frame)
	}
	return nil
}

// parseGuarded runs the DICOM parser and turns any panic into ErrNotDICOM.
func parseGuarded(b []byte) (ds dicom.Dataset, err error) {
	defer func() {
		if p := recover(); p != nil {
			ds, err = dicom.Dataset{}, fmt.Errorf("%w: DICOM parser failed: %v", ErrNotDICOM, p)
		}
	}()
	ds, err = dicom.Parse(bytes.NewReader(b), int64(len(b)), nil, dicom.SkipProcessingPixelDataValue())
	if err != nil {
		return dicom.Dataset{}, fmt.Errorf("%w: %v", ErrNotDICOM, err)
	}
	return ds, nil
}

func imageFromDataset(ds *dicom.Dataset, syn syntax, o DecodeOptions) (Image, error) {
	var im Image
	var warn []string
	im.Modality = firstString(ds, tag.Modality)
	im.Source = "DICOM " + syn.uid

	// Pixel format.
	spp, ok := firstInt(ds, tag.SamplesPerPixel)
	if !ok {
		spp = 1
	}
	photo := strings.ToUpper(firstString(ds, tag.PhotometricInterpretation))
	if spp != 1 || (photo != "" && photo != "MONOCHROME1" && photo != "MONOCHROME2") {
		return Image{}, fmt.Errorf("%w: SamplesPerPixel %d, PhotometricInterpretation %q: only greyscale (MONOCHROME1/2, one sample per pixel) images are supported", ErrUnsupported, spp, photo)
	}
	switch photo {
	case "MONOCHROME1":
		im.Inverted = true
	case "":
		warn = append(warn, "PhotometricInterpretation (0028,0004) missing: MONOCHROME2 assumed")
	}
	var pf pixelFormat
	var missing []error
	need := func(t tag.Tag, kw, num string) int {
		v, ok := firstInt(ds, t)
		if !ok {
			missing = append(missing, missingTag(kw, num, "needed to read the pixel data"))
		}
		return v
	}
	pf.rows = need(tag.Rows, "Rows", "(0028,0010)")
	pf.cols = need(tag.Columns, "Columns", "(0028,0011)")
	pf.bitsAllocated = need(tag.BitsAllocated, "BitsAllocated", "(0028,0100)")
	pixEl, err := ds.FindElementByTag(tag.PixelData)
	if err != nil {
		missing = append(missing, missingTag("PixelData", "(7FE0,0010)", "the file holds no image"))
	}
	if len(missing) > 0 {
		return Image{}, withModality(errors.Join(missing...), im.Modality)
	}
	if pf.bitsStored, ok = firstInt(ds, tag.BitsStored); !ok {
		pf.bitsStored = pf.bitsAllocated
	}
	if pf.highBit, ok = firstInt(ds, tag.HighBit); !ok {
		pf.highBit = pf.bitsStored - 1
	}
	rep, _ := firstInt(ds, tag.PixelRepresentation)
	pf.signed = rep == 1
	pf.frames = 1
	if s := firstString(ds, tag.NumberOfFrames); s != "" {
		n, err := strconv.Atoi(strings.TrimSpace(s))
		if err != nil {
			return Image{}, badTag("NumberOfFrames", "(0028,0008)", fmt.Sprintf("%q is not an integer", s))
		}
		pf.frames = n
	}
	pf.slope, pf.intercept = 1, 0
	if v, ok, err := firstFloat(ds, tag.RescaleSlope); err != nil {
		return Image{}, badTag("RescaleSlope", "(0028,1053)", err.Error())
	} else if ok {
		pf.slope = v
	}
	if v, ok, err := firstFloat(ds, tag.RescaleIntercept); err != nil {
		return Image{}, badTag("RescaleIntercept", "(0028,1052)", err.Error())
	} else if ok {
		pf.intercept = v
	}
	raw, err := rawPixels(pixEl)
	if err != nil {
		return Image{}, err
	}
	pix, err := decodeFrame(raw, syn.order, pf, o.Frame)
	if err != nil {
		return Image{}, err
	}
	if pf.frames > 1 {
		warn = append(warn, fmt.Sprintf("image holds %d frames; frame %d analysed (DecodeOptions.Frame chooses)", pf.frames, o.Frame))
	}
	im.Rows, im.Cols, im.Pix = pf.rows, pf.cols, pix

	// Geometry.
	geomWarn, imagerPlane, err := decodeGeometry(ds, o, &im)
	if err != nil {
		return Image{}, withModality(err, im.Modality)
	}
	warn = append(warn, geomWarn...)
	if im.Modality != "" && im.Modality != "RTIMAGE" {
		warn = append(warn, fmt.Sprintf("Modality is %q, not RTIMAGE", im.Modality))
	}
	im.GantryDeg = angle(ds, tagGantryAngle)
	placeWarn, err := placeImage(ds, o, &im, imagerPlane, angle(ds, tagBeamLimitingDevAngle))
	if err != nil {
		return Image{}, withModality(err, im.Modality)
	}
	warn = append(warn, placeWarn...)
	im.Warnings = warn
	if err := im.Validate(); err != nil {
		return Image{}, err
	}
	return im, nil
}

func withModality(err error, modality string) error {
	if modality == "" || modality == "RTIMAGE" {
		return err
	}
	return fmt.Errorf("%w (Modality is %q, not RTIMAGE: this does not look like a portal image)", err, modality)
}

// decodeGeometry fills the spacings and distances of im. imagerPlane is
// false when only an isocentre-plane spacing is known (PixelSpacing without
// SID and SAD), so imager-plane positions cannot be turned into pixels.
func decodeGeometry(ds *dicom.Dataset, o DecodeOptions, im *Image) (warn []string, imagerPlane bool, err error) {
	var missing []error
	distance := func(t tag.Tag, kw, num string, override float64, hint string) float64 {
		v, ok, err := firstFloat(ds, t)
		if err == nil && ok && !(v > 0) {
			err = fmt.Errorf("%g is not a positive distance", v)
		}
		switch {
		case override > 0:
			if ok && err == nil && math.Abs(v-override) > 0.5 {
				warn = append(warn, fmt.Sprintf("%s %s is %g mm in the file; the override %g mm was used", kw, num, v, override))
			}
			return override
		case err != nil:
			missing = append(missing, badTag(kw, num, err.Error()+"; set "+hint))
		case !ok:
			missing = append(missing, missingTag(kw, num, "needed to scale to the isocentre; set "+hint))
		}
		return v
	}
	sid := distance(tagRTImageSID, "RTImageSID", "(3002,0026)", o.SIDmm, "DecodeOptions.SIDmm")
	sad := distance(tagRadiationMachineSAD, "RadiationMachineSAD", "(3002,0022)", o.SADmm, "DecodeOptions.SADmm")

	var rowSp, colSp float64
	atIso := false
	ips, ipsErr := floatsN(ds, tagImagePlanePixelSpacing, 2)
	switch {
	case o.PixelSpacingMM[0] > 0 && o.PixelSpacingMM[1] > 0:
		rowSp, colSp = o.PixelSpacingMM[0], o.PixelSpacingMM[1]
	case ipsErr == nil && ips != nil:
		rowSp, colSp = ips[0], ips[1]
	case ipsErr != nil:
		missing = append(missing, badTag("ImagePlanePixelSpacing", "(3002,0011)", ipsErr.Error()+"; set DecodeOptions.PixelSpacingMM"))
	default:
		ps, psErr := floatsN(ds, tag.PixelSpacing, 2)
		if o.PixelSpacingAtIso && psErr == nil && ps != nil {
			rowSp, colSp, atIso = ps[0], ps[1], true
			warn = append(warn, fmt.Sprintf("ImagePlanePixelSpacing (3002,0011) missing: PixelSpacing (0028,0030) %g×%g mm used as the isocentre-plane spacing", ps[0], ps[1]))
			break
		}
		hint := "set DecodeOptions.PixelSpacingMM"
		if ps != nil {
			hint += ", or set DecodeOptions.PixelSpacingAtIso to use the PixelSpacing (0028,0030) present in the file as isocentre-plane spacing"
		}
		missing = append(missing, missingTag("ImagePlanePixelSpacing", "(3002,0011)", "needed for distances; "+hint))
	}
	if atIso {
		// SID and SAD are not needed when the spacing is already at the isocentre.
		kept := missing[:0]
		for _, e := range missing {
			var te *TagError
			if errors.As(e, &te) && (te.Keyword == "RTImageSID" || te.Keyword == "RadiationMachineSAD") {
				continue
			}
			kept = append(kept, e)
		}
		missing = kept
	}
	if len(missing) > 0 {
		return warn, false, errors.Join(missing...)
	}
	imagerPlane = true
	if atIso {
		if sid > 0 && sad > 0 {
			rowSp, colSp = rowSp*sid/sad, colSp*sid/sad
		} else {
			sid, sad = 0, 0
		}
	}
	im.SIDmm, im.SADmm, im.RowSpacingMM, im.ColSpacingMM = sid, sad, rowSp, colSp
	if atIso && sid == 0 {
		imagerPlane = false
	}
	return warn, imagerPlane, nil
}

// rawPixels returns the unprocessed native pixel bytes of the PixelData element.
func rawPixels(e *dicom.Element) ([]byte, error) {
	if e.Value == nil || e.Value.ValueType() != dicom.PixelData {
		return nil, fmt.Errorf("%w: PixelData (7FE0,0010) has no pixel value", ErrUnsupported)
	}
	info, ok := e.Value.GetValue().(dicom.PixelDataInfo)
	if !ok {
		return nil, fmt.Errorf("%w: PixelData (7FE0,0010) has no pixel value", ErrUnsupported)
	}
	if info.IsEncapsulated {
		return nil, fmt.Errorf("%w: encapsulated (compressed) pixel data; export the image uncompressed", ErrUnsupported)
	}
	if !info.IntentionallyUnprocessed || info.UnprocessedValueData == nil {
		return nil, fmt.Errorf("%w: PixelData (7FE0,0010) could not be read as native pixels", ErrUnsupported)
	}
	return info.UnprocessedValueData, nil
}

func firstString(ds *dicom.Dataset, t tag.Tag) string {
	e, err := ds.FindElementByTag(t)
	if err != nil {
		return ""
	}
	return elemString(e)
}

func elemString(e *dicom.Element) string {
	if e == nil || e.Value == nil || e.Value.ValueType() != dicom.Strings {
		return ""
	}
	s, ok := e.Value.GetValue().([]string)
	if !ok || len(s) == 0 {
		return ""
	}
	return strings.TrimSpace(s[0])
}

func firstInt(ds *dicom.Dataset, t tag.Tag) (int, bool) {
	e, err := ds.FindElementByTag(t)
	if err != nil || e.Value == nil || e.Value.ValueType() != dicom.Ints {
		return 0, false
	}
	v, ok := e.Value.GetValue().([]int)
	if !ok || len(v) == 0 {
		return 0, false
	}
	return v[0], true
}

// elemFloats reads a DS (decimal string) or FL/FD element.
func elemFloats(e *dicom.Element) ([]float64, error) {
	if e == nil || e.Value == nil {
		return nil, nil
	}
	switch e.Value.ValueType() {
	case dicom.Floats:
		v, _ := e.Value.GetValue().([]float64)
		return v, nil
	case dicom.Strings:
		ss, _ := e.Value.GetValue().([]string)
		var out []float64
		for _, s := range ss {
			s = strings.TrimSpace(s)
			if s == "" {
				continue
			}
			v, err := strconv.ParseFloat(s, 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("%q is not a number", s)
			}
			out = append(out, v)
		}
		return out, nil
	}
	return nil, fmt.Errorf("value of type %v is not a number", e.Value.ValueType())
}

// firstFloat returns the first number of element t; ok is false when the
// element is absent or empty.
func firstFloat(ds *dicom.Dataset, t tag.Tag) (v float64, ok bool, err error) {
	e, ferr := ds.FindElementByTag(t)
	if ferr != nil {
		return 0, false, nil
	}
	vs, err := elemFloats(e)
	if err != nil || len(vs) == 0 {
		return 0, false, err
	}
	return vs[0], true, nil
}

// floatsN returns the n numbers of element t, nil when absent or empty, and
// an error when present with the wrong count or non-positive values.
func floatsN(ds *dicom.Dataset, t tag.Tag, n int) ([]float64, error) {
	e, ferr := ds.FindElementByTag(t)
	if ferr != nil {
		return nil, nil
	}
	vs, err := elemFloats(e)
	if err != nil {
		return nil, err
	}
	if len(vs) == 0 {
		return nil, nil
	}
	if len(vs) != n {
		return nil, fmt.Errorf("%d value(s) %v; expected %d", len(vs), vs, n)
	}
	if t != tagRTImagePosition {
		for _, v := range vs {
			if !(v > 0) {
				return nil, fmt.Errorf("values %v must be positive", vs)
			}
		}
	}
	return vs, nil
}

// angle reads an angle in degrees at the top level, else in the first
// ExposureSequence item.
func angle(ds *dicom.Dataset, t tag.Tag) *float64 {
	if v, ok, err := firstFloat(ds, t); ok && err == nil {
		return &v
	}
	seq, err := ds.FindElementByTag(tagExposureSequence)
	if err != nil || seq.Value == nil || seq.Value.ValueType() != dicom.Sequences {
		return nil
	}
	items, _ := seq.Value.GetValue().([]*dicom.SequenceItemValue)
	for _, it := range items {
		elems, _ := it.GetValue().([]*dicom.Element)
		for _, e := range elems {
			if e.Tag != t {
				continue
			}
			if vs, err := elemFloats(e); err == nil && len(vs) > 0 {
				v := vs[0]
				return &v
			}
		}
	}
	return nil
}
