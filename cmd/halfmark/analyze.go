package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"os"
	"sort"
	"strconv"
	"strings"
	"text/tabwriter"

	"halfmark/analysis/epid"
	"halfmark/analysis/profile"
	"halfmark/analysis/rawdata"
)

const analyzeUsage = `Usage: halfmark analyze profile FILE [--axis X|Y] [--fff|--no-fff] [--normalise cax|max] [--interp linear|cubic] [--smooth N] [--json]
       halfmark analyze image FILE.dcm [--sid MM --sad MM --pixel MM] [--collimator-deg DEG] [--json]
       halfmark analyze picket FILE.dcm --pickets -60,-30,0,30,60 [--layout 60|80|SPEC] [--tolerance MM] [--collimator-deg DEG] [--json]

A profile file has two columns, position_mm and signal (comma, tab, semicolon or space separated,
an optional header line, # comments). Images are DICOM RT Images; the collimator angle names the
image sides X1, X2, Y1, Y2 (--collimator-deg supplies it when the file lacks it).`

func cmdAnalyze(ctx context.Context, e env) error {
	if len(e.args) == 0 || e.args[0] == "--help" || e.args[0] == "-h" {
		fmt.Fprintln(e.stdout, analyzeUsage)
		if len(e.args) == 0 {
			return exitUsage{fmt.Errorf("say what to analyse: profile, image or picket")}
		}
		return errHelp
	}
	what := e.args[0]
	e.args = e.args[1:]
	fs := newFlags(e, "analyze "+what, "analyze "+what+" [flags] FILE")
	fs.Usage = func() { printUsage(e.stdout, fs, analyzeUsage) }
	asJSON := fs.Bool("json", false, "print the result as JSON")
	var pp rawdata.ProfileParams
	var ip rawdata.ImageParams
	var fff, noFFF bool
	var pickets string
	var kp rawdata.PicketParams
	switch what {
	case "profile":
		fs.StringVar(&pp.Axis, "axis", "X", "X (crossline: low side is X1) or Y (inline: low side is Y1)")
		fs.BoolVar(&fff, "fff", false, "treat the profile as flattening-filter-free")
		fs.BoolVar(&noFFF, "no-fff", false, "treat the profile as flattened (no FFF detection)")
		fs.StringVar(&pp.Normalise, "normalise", "cax", "normalise to the central axis (cax) or the maximum (max)")
		fs.StringVar(&pp.Interpolation, "interp", "linear", "interpolation between samples: linear or cubic (monotone)")
		fs.IntVar(&pp.Smooth, "smooth", 0, "passes of light 3-point smoothing (0 = off)")
	case "image", "picket":
		fs.Float64Var(&ip.SIDmm, "sid", 0, "source-to-imager distance in mm, when the file lacks RTImageSID")
		fs.Float64Var(&ip.SADmm, "sad", 0, "source-to-axis distance in mm, when the file lacks RadiationMachineSAD")
		fs.Float64Var(&ip.PixelMM, "pixel", 0, "imager pixel pitch in mm, when the file lacks ImagePlanePixelSpacing")
		fs.Func("collimator-deg", "collimator angle in degrees (IEC 61217), when the file lacks BeamLimitingDeviceAngle or to override it", func(s string) error {
			v, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || v < -360 || v > 360 {
				return fmt.Errorf("give the angle in degrees, -360 to 360 (got %q)", s)
			}
			ip.CollimatorDeg = &v
			return nil
		})
		if what == "picket" {
			fs.StringVar(&pickets, "pickets", "", "nominal strip centres in mm at the isocentre, e.g. -60,-30,0,30,60 (empty: found in the image)")
			fs.StringVar(&kp.Layout, "layout", "60", "MLC leaf layout: 60, 80 or a spec like 10x10,40x5,10x10 (count x width mm, from Y2)")
			fs.Float64Var(&kp.ToleranceMM, "tolerance", 0.5, "tolerance on each leaf end, mm")
		}
	default:
		return exitUsage{fmt.Errorf("unknown analysis %q: use profile, image or picket", what)}
	}
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return exitUsage{fmt.Errorf("give one file (or - for standard input)")}
	}
	data, err := readInput(fs.Arg(0), e.stdin)
	if err != nil {
		return err
	}
	var result any
	switch what {
	case "profile":
		if fff && noFFF {
			return exitUsage{fmt.Errorf("give --fff or --no-fff, not both")}
		}
		if fff || noFFF {
			pp.FFF = &fff
		}
		r, err := rawdata.Profile(data, pp)
		if err != nil {
			return err
		}
		result = r
		if !*asJSON {
			return printProfile(e.stdout, r, pp.Axis)
		}
	case "image":
		r, err := rawdata.Image(data, ip)
		if err != nil {
			return err
		}
		result = r
		if !*asJSON {
			return printField(e.stdout, r)
		}
	case "picket":
		kp.ImageParams = ip
		if kp.PicketsMM, err = rawdata.ParseList(pickets); err != nil {
			return exitUsage{fmt.Errorf("--pickets: %v", err)}
		}
		r, err := rawdata.Picket(data, kp)
		if err != nil {
			return err
		}
		result = r
		if !*asJSON {
			return printPicket(e.stdout, r)
		}
	}
	enc := json.NewEncoder(e.stdout)
	enc.SetIndent("", "  ")
	return enc.Encode(result)
}

func readInput(name string, stdin io.Reader) ([]byte, error) {
	if name == "-" {
		return io.ReadAll(io.LimitReader(stdin, 512<<20))
	}
	return os.ReadFile(name)
}

func printProfile(w io.Writer, r profile.Result, axis string) error {
	if axis == "" {
		axis = "X"
	}
	axis = strings.ToUpper(axis)
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "method\t%s\n", r.Method)
	fmt.Fprintf(tw, "field size\t%.2f mm\n", r.FieldSizeMM)
	fmt.Fprintf(tw, "centre offset\t%+.2f mm\n", r.CentreMM)
	fmt.Fprintf(tw, "%s1 edge\t%.2f mm from the axis\t(50%% point at x = %.2f mm)\tpenumbra 80–20 %.2f mm\n", axis, -r.LeftEdgeMM, r.LeftEdgeMM, r.LeftPenumbraMM)
	fmt.Fprintf(tw, "%s2 edge\t%.2f mm from the axis\t(50%% point at x = %.2f mm)\tpenumbra 80–20 %.2f mm\n", axis, r.RightEdgeMM, r.RightEdgeMM, r.RightPenumbraMM)
	fmt.Fprintf(tw, "flatness\t%.2f %%\t(IEC 60976 ratio form %.2f %%)\n", r.FlatnessPct, r.FlatnessIECPct)
	fmt.Fprintf(tw, "symmetry\t%.2f %%\t(IEC 60976 ratio form %.2f %%, area form %.2f %%)\n", r.SymmetryPct, r.SymmetryIECPct, r.SymmetryAreaPct)
	fmt.Fprintf(tw, "normalisation\t%s\n", r.Normalisation)
	for _, warn := range r.Warnings {
		fmt.Fprintf(tw, "warning\t%s\n", warn)
	}
	return tw.Flush()
}

func printField(w io.Writer, r epid.FieldResult) error {
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "edge\tposition (mm, isocentre)\tpenumbra 80–20 (mm)")
	for _, e := range []struct {
		name string
		v    float64
	}{{"X1", r.X1MM}, {"X2", r.X2MM}, {"Y1", r.Y1MM}, {"Y2", r.Y2MM}} {
		fmt.Fprintf(tw, "%s\t%.2f\t%.2f\n", e.name, e.v, r.PenumbraMM[e.name])
	}
	fmt.Fprintf(tw, "field X × Y\t%.2f × %.2f mm\n", r.FieldXMM, r.FieldYMM)
	fmt.Fprintf(tw, "centre offset X, Y\t%+.2f, %+.2f mm\n", r.CentreXMM, r.CentreYMM)
	fmt.Fprintf(tw, "rotation\t%.2f°\n", r.RotationDeg)
	if r.Inverted {
		fmt.Fprintln(tw, "greyscale\tinverted (handled)")
	}
	printGeometry(tw, r.Geometry)
	for _, warn := range r.Warnings {
		fmt.Fprintf(tw, "warning\t%s\n", warn)
	}
	return tw.Flush()
}

func printPicket(w io.Writer, r epid.PicketResult) error {
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintf(tw, "layout\t%s\n", r.Layout)
	fmt.Fprintf(tw, "leaf pairs measured\t%d\n", r.PairsMeasured)
	fmt.Fprintf(tw, "max |error|\t%.2f mm\n", r.MaxAbsErrorMM)
	fmt.Fprintf(tw, "max |residual|\t%.2f mm\n", r.MaxAbsResidualMM)
	for _, b := range r.Banks {
		fmt.Fprintf(tw, "bank %d\tmean error %+.2f mm\tmax |error| %.2f mm\n", b.Bank, b.MeanErrorMM, b.MaxAbsErrorMM)
	}
	ex := append([]epid.LeafResult(nil), r.Exceeding...)
	sort.Slice(ex, func(i, j int) bool { return ex[i].Pair < ex[j].Pair })
	if len(ex) == 0 {
		fmt.Fprintf(tw, "beyond %.2f mm (%s)\tnone\n", r.ToleranceMM, r.Criterion)
	}
	for _, l := range ex {
		fmt.Fprintf(tw, "beyond tolerance\tbank %d pair %d at picket %.1f mm\terror %+.2f mm, residual %+.2f mm\n", l.Bank, l.Pair, l.PicketMM, l.ErrorMM, l.ResidualMM)
	}
	printGeometry(tw, r.Geometry)
	for _, warn := range r.Warnings {
		fmt.Fprintf(tw, "warning\t%s\n", warn)
	}
	return tw.Flush()
}

// printGeometry shows what the names and distances rest on: the axis
// source, imager translation, orientation and collimator angle.
func printGeometry(w io.Writer, g *epid.GeometryUsed) {
	if g == nil {
		return
	}
	fmt.Fprintf(w, "axis\t%s\n", g.AxisSource)
	if t := g.ReceptorTranslationMM; len(t) == 3 {
		fmt.Fprintf(w, "imager translation\t%g, %g, %g mm\n", t[0], t[1], t[2])
	} else {
		fmt.Fprintln(w, "imager translation\tnot in the file")
	}
	o := make([]string, len(g.Orientation))
	for i, v := range g.Orientation {
		o[i] = strconv.FormatFloat(v, 'g', -1, 64)
	}
	fmt.Fprintf(w, "orientation\t(%s)\t%s\n", strings.Join(o, ", "), g.OrientationSource)
	if g.CollimatorDeg != nil {
		fmt.Fprintf(w, "collimator\t%g°\t%s\n", *g.CollimatorDeg, g.CollimatorSource)
	} else {
		fmt.Fprintf(w, "collimator\tunknown\t%s\n", g.CollimatorSource)
	}
	sides := make([]string, 0, 4)
	for _, e := range []string{epid.EdgeX1, epid.EdgeX2, epid.EdgeY1, epid.EdgeY2} {
		sides = append(sides, e+" "+g.Sides[e])
	}
	fmt.Fprintf(w, "names (%d°)\t%s of the stored image\n", g.NamesQuadrantDeg, strings.Join(sides, ", "))
}
