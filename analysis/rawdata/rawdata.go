// Package rawdata turns raw measurement files (profile CSV, EPID DICOM RT
// Images, picket-fence images) into analysis results and edge results, the
// same way for the command line, the API, the dashboard and recomputation.
// It is pure: bytes in, results out.
package rawdata

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"strings"

	"halfmark"
	"halfmark/analysis/epid"
	"halfmark/analysis/profile"
)

// Version identifies the analysis code. Bump it whenever a change can move
// a computed edge; stored checks record it so they can be recomputed.
const Version = "2026.12-2"

// ProfileParams choose how a 1-D profile is analysed. Axis says which jaws
// the profile crosses: "X" (crossline: the profile's low side is X1) or
// "Y" (inline: the low side is Y1); coordinates increase from the X1 (Y1)
// side toward X2 (Y2), as in IEC 61217.
type ProfileParams struct {
	Normalise     string `json:"normalise,omitempty"`     // "cax" (default) or "max"
	Interpolation string `json:"interpolation,omitempty"` // "linear" (default) or "cubic"
	FFF           *bool  `json:"fff,omitempty"`           // nil: detect a peaked profile
	Smooth        int    `json:"smooth,omitempty"`        // 3-point smoothing passes, 0 = off
	Axis          string `json:"axis,omitempty"`          // "X" (default) or "Y"
}

// ImageParams supply what an RT Image may lack.
type ImageParams struct {
	SIDmm   float64 `json:"sid_mm,omitempty"`   // source-to-imager distance, overrides RTImageSID
	SADmm   float64 `json:"sad_mm,omitempty"`   // source-to-axis distance, overrides RadiationMachineSAD
	PixelMM float64 `json:"pixel_mm,omitempty"` // imager-plane pixel pitch, overrides ImagePlanePixelSpacing
	// CollimatorDeg is the collimator angle in degrees (IEC 61217) when the
	// file lacks BeamLimitingDeviceAngle (300A,0120), or to override it. It
	// decides which image side is X1, X2, Y1, Y2 (and the MLC banks).
	CollimatorDeg *float64 `json:"collimator_deg,omitempty"`
}

// PicketParams choose how a picket-fence image is analysed.
type PicketParams struct {
	ImageParams
	PicketsMM   []float64 `json:"pickets_mm,omitempty"`   // nominal strip centres at the isocentre; empty: found in the image
	Layout      string    `json:"layout,omitempty"`       // "60", "80" or a spec like "10x10,40x5,10x10"
	ToleranceMM float64   `json:"tolerance_mm,omitempty"` // default 0.5 mm
}

// MaxProfileSamples bounds one profile: a water-tank scan at 0.1 mm over
// 60 cm has 6,000 samples; more than this is not a profile.
const MaxProfileSamples = 100_000

// Profile parses a CSV/TSV profile and analyses it.
func Profile(data []byte, p ProfileParams) (profile.Result, error) {
	if _, err := axis(p.Axis); err != nil {
		return profile.Result{}, err
	}
	samples, err := profile.ParseCSV(bytes.NewReader(data))
	if err != nil {
		return profile.Result{}, err
	}
	if len(samples) > MaxProfileSamples {
		return profile.Result{}, fmt.Errorf("the profile has %d samples; at most %d are analysed (resample the scan)", len(samples), MaxProfileSamples)
	}
	return profile.Analyze(samples, profile.Options{Normalise: p.Normalise, Interpolation: p.Interpolation,
		FFF: p.FFF, SmoothPasses: p.Smooth})
}

func (p ImageParams) decode() epid.DecodeOptions {
	o := epid.DecodeOptions{SIDmm: p.SIDmm, SADmm: p.SADmm, CollimatorDeg: p.CollimatorDeg}
	if p.PixelMM > 0 {
		o.PixelSpacingMM = [2]float64{p.PixelMM, p.PixelMM}
	}
	return o
}

// Image decodes an RT Image and measures its jaw-defined field. The result
// carries "geometry_used" (epid.GeometryUsed): the axis source, imager
// translation, orientation and collimator angle the names rest on, and
// "warnings" (a missing collimator angle among them).
func Image(data []byte, p ImageParams) (epid.FieldResult, error) {
	img, err := epid.DecodeDICOMBytes(data, p.decode())
	if err != nil {
		return epid.FieldResult{}, err
	}
	return epid.AnalyzeField(img, epid.FieldOptions{})
}

// Picket decodes a picket-fence RT Image and measures every leaf end.
func Picket(data []byte, p PicketParams) (epid.PicketResult, error) {
	layout, err := Layout(p.Layout)
	if err != nil {
		return epid.PicketResult{}, err
	}
	img, err := epid.DecodeDICOMBytes(data, p.decode())
	if err != nil {
		return epid.PicketResult{}, err
	}
	return epid.AnalyzePicketFence(img, epid.PicketOptions{NominalMM: p.PicketsMM, Layout: layout, ToleranceMM: p.ToleranceMM})
}

// Layout returns a shipped leaf layout ("60", "80", default "60") or parses
// a site's own spec.
func Layout(s string) (epid.LeafLayout, error) {
	switch strings.TrimSpace(s) {
	case "", "60":
		return epid.Layout60, nil
	case "80":
		return epid.Layout80, nil
	}
	return epid.ParseLayout(s)
}

// ParseList reads comma-separated numbers such as "-60,-30,0,30,60".
func ParseList(s string) ([]float64, error) {
	var out []float64
	for _, f := range strings.Split(s, ",") {
		f = strings.TrimSpace(f)
		if f == "" {
			continue
		}
		v, err := strconv.ParseFloat(f, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%q is not a number; write positions in mm like -60,-30,0,30,60", f)
		}
		out = append(out, v)
	}
	return out, nil
}

func axis(a string) (string, error) {
	switch strings.ToUpper(strings.TrimSpace(a)) {
	case "", "X":
		return "X", nil
	case "Y":
		return "Y", nil
	}
	return "", fmt.Errorf("axis %q: use X (crossline) or Y (inline)", a)
}

func ptr(v float64) *float64 { return &v }

// ProfileEdges converts a profile result to the store's edge convention:
// the low-side 50% point is X1 (or Y1) at distance −left_edge_mm, the
// high side X2 (Y2) at right_edge_mm; penumbra per edge.
func ProfileEdges(r profile.Result, axisName string) ([]halfmark.EdgeResult, error) {
	a, err := axis(axisName)
	if err != nil {
		return nil, err
	}
	return []halfmark.EdgeResult{
		{Edge: a + "1", PositionMM: -r.LeftEdgeMM, PenumbraMM: ptr(r.LeftPenumbraMM)},
		{Edge: a + "2", PositionMM: r.RightEdgeMM, PenumbraMM: ptr(r.RightPenumbraMM)},
	}, nil
}

// ImageEdges converts a field result (already in the isocentre plane and
// in the store's convention) to edge results.
func ImageEdges(r epid.FieldResult) []halfmark.EdgeResult {
	pos := map[string]float64{"X1": r.X1MM, "X2": r.X2MM, "Y1": r.Y1MM, "Y2": r.Y2MM}
	out := make([]halfmark.EdgeResult, 0, 4)
	for _, e := range []string{"X1", "X2", "Y1", "Y2"} {
		er := halfmark.EdgeResult{Edge: e, PositionMM: pos[e]}
		if p, ok := r.PenumbraMM[e]; ok {
			er.PenumbraMM = ptr(p)
		}
		out = append(out, er)
	}
	return out
}

// PicketEdges converts a picket fence to MLC edge results: for the picket
// nearest the central axis, each measured leaf end as B<bank>P<pair> at its
// distance from the axis, positive on its own side (bank 1 toward X1, so
// position = −x; bank 2 toward X2, position = x), in the isocentre plane.
func PicketEdges(r epid.PicketResult) []halfmark.EdgeResult {
	if len(r.Leaves) == 0 {
		return nil
	}
	central := r.Leaves[0].PicketMM
	for _, l := range r.Leaves {
		if math.Abs(l.PicketMM) < math.Abs(central) {
			central = l.PicketMM
		}
	}
	var out []halfmark.EdgeResult
	for _, l := range r.Leaves {
		if l.PicketMM != central {
			continue
		}
		pos := l.PositionMM
		if l.Bank == 1 {
			pos = -pos
		}
		out = append(out, halfmark.EdgeResult{Edge: fmt.Sprintf("B%dP%d", l.Bank, l.Pair), PositionMM: pos})
	}
	return out
}

// Analyze runs the analysis of raw data of the given kind with its options
// (JSON, may be empty) and returns the result as JSON with the edge results
// for a check. Used to store a check from raw data and to recompute one.
func Analyze(kind halfmark.RawKind, data []byte, options json.RawMessage) (analysis json.RawMessage, edges []halfmark.EdgeResult, err error) {
	dec := func(v any) error {
		if len(options) == 0 {
			return nil
		}
		d := json.NewDecoder(bytes.NewReader(options))
		d.DisallowUnknownFields()
		if err := d.Decode(v); err != nil {
			return fmt.Errorf("analysis options: %v", err)
		}
		return nil
	}
	var res any
	switch kind {
	case halfmark.RawProfile:
		var p ProfileParams
		if err := dec(&p); err != nil {
			return nil, nil, err
		}
		r, err := Profile(data, p)
		if err != nil {
			return nil, nil, err
		}
		if edges, err = ProfileEdges(r, p.Axis); err != nil {
			return nil, nil, err
		}
		res = r
	case halfmark.RawImage:
		var p ImageParams
		if err := dec(&p); err != nil {
			return nil, nil, err
		}
		r, err := Image(data, p)
		if err != nil {
			return nil, nil, err
		}
		edges, res = ImageEdges(r), r
	case halfmark.RawPicket:
		var p PicketParams
		if err := dec(&p); err != nil {
			return nil, nil, err
		}
		r, err := Picket(data, p)
		if err != nil {
			return nil, nil, err
		}
		edges, res = PicketEdges(r), r
	default:
		return nil, nil, fmt.Errorf("raw data kind %q: use profile, image or picket", kind)
	}
	b, err := json.Marshal(res)
	return b, edges, err
}
