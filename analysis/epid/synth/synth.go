// Package synth renders synthetic EPID images with known, analytic edges —
// open jaw fields and MLC picket fences — and writes them as DICOM RT
// Images with the DICOM library's own writer. Tests and the demo clinic use
// it; nothing here is measured data.
//
// Every edge is an error-function edge (a step blurred by a Gaussian of
// width σ), so its 50% point is the geometric edge and its 80–20 width is
// 2·0.8416·σ = 1.6832·σ (physics.md, derived).
package synth

import (
	"bytes"
	"cmp"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strconv"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/frame"
	"github.com/suyashkumar/dicom/pkg/tag"
	"github.com/suyashkumar/dicom/pkg/uid"
)

// Imager is the detector geometry: Rows × Cols pixels of SpacingMM at
// SIDmm from the source on a machine of SADmm. The default (Default) is a
// 1024×768 imager of 0.392 mm at SID 1500 mm, SAD 1000 mm: 0.2613 mm per
// pixel at the isocentre (physics.md, derived).
type Imager struct {
	Rows, Cols int
	SpacingMM  float64
	SIDmm      float64
	SADmm      float64
}

// Default is the imager used unless another is given.
var Default = Imager{Rows: 768, Cols: 1024, SpacingMM: 0.392, SIDmm: 1500, SADmm: 1000}

// IsoPixelMM is the pixel pitch at the isocentre: spacing·SAD/SID.
func (g Imager) IsoPixelMM() float64 { return g.SpacingMM * g.SADmm / g.SIDmm }

// Axis is the central axis in pixel coordinates: the image centre.
func (g Imager) Axis() (row, col float64) { return float64(g.Rows-1) / 2, float64(g.Cols-1) / 2 }

// Phi is the standard normal cumulative distribution Φ(z) = ½·erfc(−z/√2).
func Phi(z float64) float64 { return 0.5 * math.Erfc(-z/math.Sqrt2) }

// Field is an open rectangular field with jaw distances X1, X2, Y1, Y2 (mm
// at the isocentre from the axis, positive on their own side) blurred by
// Sigma, turned RotDeg counter-clockwise as displayed:
//
//	D(x, y) = Bg + Amp·[Φ((x'+X1)/σ) − Φ((x'−X2)/σ)]·[Φ((y'+Y1)/σ) − Φ((y'−Y2)/σ)]
//	x' = x·cosθ + y·sinθ,  y' = −x·sinθ + y·cosθ
//
// x grows to the right (toward X2), y upward (toward Y2, row 0 at the top).
type Field struct {
	X1, X2, Y1, Y2 float64
	Sigma          float64
	RotDeg         float64
	Bg, Amp        float64
	Noise          float64 // σ of added Gaussian noise, signal units
	Seed           uint64
}

// Pixels renders the field row-major on g, with its axis at (axisRow,
// axisCol) (pixel coordinates).
func (f Field) Pixels(g Imager, axisRow, axisCol float64) []float64 {
	iso := g.IsoPixelMM()
	th := f.RotDeg * math.Pi / 180
	cs, sn := math.Cos(th), math.Sin(th)
	pix := make([]float64, g.Rows*g.Cols)
	var rng *rand.Rand
	if f.Noise > 0 {
		rng = rand.New(rand.NewPCG(f.Seed, 0x5eed))
	}
	fx := make([]float64, g.Cols)
	fy := make([]float64, g.Rows)
	for c := range fx {
		x := (float64(c) - axisCol) * iso
		fx[c] = Phi((x+f.X1)/f.Sigma) - Phi((x-f.X2)/f.Sigma)
	}
	for r := range fy {
		y := (axisRow - float64(r)) * iso
		fy[r] = Phi((y+f.Y1)/f.Sigma) - Phi((y-f.Y2)/f.Sigma)
	}
	for r := range g.Rows {
		y := (axisRow - float64(r)) * iso
		for c := range g.Cols {
			var v float64
			if f.RotDeg == 0 {
				v = fx[c] * fy[r]
			} else {
				x := (float64(c) - axisCol) * iso
				xr, yr := x*cs+y*sn, -x*sn+y*cs
				v = (Phi((xr+f.X1)/f.Sigma) - Phi((xr-f.X2)/f.Sigma)) * (Phi((yr+f.Y1)/f.Sigma) - Phi((yr-f.Y2)/f.Sigma))
			}
			v = f.Bg + f.Amp*v
			if rng != nil {
				v += f.Noise * rng.NormFloat64()
			}
			pix[r*g.Cols+c] = v
		}
	}
	return pix
}

// Picket is a picket fence: for every leaf pair (widths in mm at the
// isocentre from the Y2 side, centred on the axis) and every picket centre
// x_j, an open strip between the bank 1 tip x_j − Width/2 + e1 and the
// bank 2 tip x_j + Width/2 + e2, blurred along x by Sigma and windowed in y
// by Y jaws at ±YJaw:
//
//	D = Bg + Amp·Σ_j [Φ((x − left)/σ) − Φ((x − right)/σ)]·[Φ((y+YJaw)/σ) − Φ((y−YJaw)/σ)]
type Picket struct {
	LeafWidthsMM []float64
	Pickets      []float64
	Width        float64
	Sigma        float64
	YJaw         float64
	Bg, Amp      float64
	Noise        float64
	Seed         uint64
	Shift        float64            // global x shift of every strip, mm
	RotDeg       float64            // strips turned counter-clockwise: x shifts by −y·tanθ
	Err1         map[[2]int]float64 // {pair (from 1), picket (from 0)} → bank 1 tip error, mm
	Err2         map[[2]int]float64
}

// Pixels renders the picket fence on g with the axis at the image centre.
func (p Picket) Pixels(g Imager) []float64 {
	ar, ac := g.Axis()
	iso := g.IsoPixelMM()
	pix := make([]float64, g.Rows*g.Cols)
	var rng *rand.Rand
	if p.Noise > 0 {
		rng = rand.New(rand.NewPCG(p.Seed, 0xfe11ce))
	}
	total := 0.0
	for _, w := range p.LeafWidthsMM {
		total += w
	}
	tan := math.Tan(p.RotDeg * math.Pi / 180)
	cache := map[int][]float64{}
	for r := range g.Rows {
		y := (ar - float64(r)) * iso
		pair, top := 0, total/2
		for i, w := range p.LeafWidthsMM {
			if y <= top && y > top-w {
				pair = i + 1
				break
			}
			top -= w
		}
		jaw := Phi((y+p.YJaw)/p.Sigma) - Phi((y-p.YJaw)/p.Sigma)
		prof := cache[pair]
		if prof == nil {
			prof = make([]float64, g.Cols)
			for c := range g.Cols {
				x := (float64(c) - ac) * iso
				v := 0.0
				if pair > 0 {
					for j, xc := range p.Pickets {
						xc += p.Shift - y*tan
						l := xc - p.Width/2 + p.Err1[[2]int{pair, j}]
						rr := xc + p.Width/2 + p.Err2[[2]int{pair, j}]
						v += Phi((x-l)/p.Sigma) - Phi((x-rr)/p.Sigma)
					}
				}
				prof[c] = v
			}
			if p.RotDeg == 0 {
				cache[pair] = prof
			}
		}
		for c := range g.Cols {
			v := p.Bg + p.Amp*prof[c]*jaw
			if rng != nil {
				v += p.Noise * rng.NormFloat64()
			}
			pix[r*g.Cols+c] = v
		}
	}
	return pix
}

// RT Image tags (DICOM PS3.3 C.8.8.2; tag numbers as in physics.md).
var (
	TagRTImagePlane           = tag.Tag{Group: 0x3002, Element: 0x000C}
	TagImagePlanePixelSpacing = tag.Tag{Group: 0x3002, Element: 0x0011}
	TagRadiationMachineSAD    = tag.Tag{Group: 0x3002, Element: 0x0022}
	TagRTImageSID             = tag.Tag{Group: 0x3002, Element: 0x0026}
	TagExposureSequence       = tag.Tag{Group: 0x3002, Element: 0x0030}
	TagGantryAngle            = tag.Tag{Group: 0x300A, Element: 0x011E}
	TagBeamLimitingDevAngle   = tag.Tag{Group: 0x300A, Element: 0x0120}
)

// RTImage builds a DICOM RT Image data set around frames of stored values
// (rounded and clamped to 16 bits). Omit drops elements; Set replaces or
// adds them (values as dicom.NewElement takes them).
type RTImage struct {
	Imager
	Frames      [][]float64
	Photometric string // default MONOCHROME2
	TransferUID string // default explicit VR little endian
	Omit        map[tag.Tag]bool
	Set         map[tag.Tag]any
	Exposure    []*dicom.Element // items of ExposureSequence, if any
	GantryDeg   float64
	CollDeg     float64
}

func strs(s ...string) []string { return s }

func num(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }

// Dataset returns the data set.
func (d RTImage) Dataset() (dicom.Dataset, error) {
	ph, ts := d.Photometric, d.TransferUID
	if ph == "" {
		ph = "MONOCHROME2"
	}
	if ts == "" {
		ts = uid.ExplicitVRLittleEndian
	}
	vals := map[tag.Tag]any{
		tag.MediaStorageSOPClassUID:    strs("1.2.840.10008.5.1.4.1.1.481.1"),
		tag.MediaStorageSOPInstanceUID: strs("1.2.826.0.1.3680043.2.1125.1"),
		tag.TransferSyntaxUID:          strs(ts),
		tag.SOPClassUID:                strs("1.2.840.10008.5.1.4.1.1.481.1"),
		tag.SOPInstanceUID:             strs("1.2.826.0.1.3680043.2.1125.1"),
		tag.Modality:                   strs("RTIMAGE"),
		tag.SamplesPerPixel:            []int{1},
		tag.PhotometricInterpretation:  strs(ph),
		tag.Rows:                       []int{d.Rows},
		tag.Columns:                    []int{d.Cols},
		tag.BitsAllocated:              []int{16},
		tag.BitsStored:                 []int{16},
		tag.HighBit:                    []int{15},
		tag.PixelRepresentation:        []int{0},
		TagRTImagePlane:                strs("NORMAL"),
		TagImagePlanePixelSpacing:      strs(num(d.SpacingMM), num(d.SpacingMM)),
		TagRadiationMachineSAD:         strs(num(d.SADmm)),
		TagRTImageSID:                  strs(num(d.SIDmm)),
		TagGantryAngle:                 strs(num(d.GantryDeg)),
		TagBeamLimitingDevAngle:        strs(num(d.CollDeg)),
	}
	if len(d.Frames) > 1 {
		vals[tag.NumberOfFrames] = strs(strconv.Itoa(len(d.Frames)))
	}
	var frames []*frame.Frame
	for _, f := range d.Frames {
		if len(f) != d.Rows*d.Cols {
			return dicom.Dataset{}, fmt.Errorf("synth: frame has %d values for %d×%d pixels", len(f), d.Rows, d.Cols)
		}
		nf := frame.NewNativeFrame[uint16](16, d.Rows, d.Cols, d.Rows*d.Cols, 1)
		for i, v := range f {
			nf.RawData[i] = uint16(math.Max(0, math.Min(65535, math.Round(v))))
		}
		frames = append(frames, &frame.Frame{NativeData: nf})
	}
	vals[tag.PixelData] = dicom.PixelDataInfo{Frames: frames}
	if d.Exposure != nil {
		vals[TagExposureSequence] = [][]*dicom.Element{d.Exposure}
	}
	for k, v := range d.Set {
		vals[k] = v
	}
	var elems []*dicom.Element
	for k, v := range vals {
		if d.Omit[k] {
			continue
		}
		e, err := dicom.NewElement(k, v)
		if err != nil {
			return dicom.Dataset{}, fmt.Errorf("synth: element %v: %w", k, err)
		}
		elems = append(elems, e)
	}
	slices.SortFunc(elems, func(a, b *dicom.Element) int {
		return cmp.Or(cmp.Compare(a.Tag.Group, b.Tag.Group), cmp.Compare(a.Tag.Element, b.Tag.Element))
	})
	return dicom.Dataset{Elements: elems}, nil
}

// Bytes writes the data set as a DICOM file.
func (d RTImage) Bytes() ([]byte, error) {
	ds, err := d.Dataset()
	if err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	if err := dicom.Write(&buf, ds); err != nil {
		return nil, fmt.Errorf("synth: write DICOM: %w", err)
	}
	return buf.Bytes(), nil
}
