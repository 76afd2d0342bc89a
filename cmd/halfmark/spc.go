package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
	"text/tabwriter"

	"halfmark/analysis/spc"
)

// optFloat is a float flag that remembers whether it was given.
type optFloat struct{ v *float64 }

func (o *optFloat) String() string {
	if o == nil || o.v == nil {
		return ""
	}
	return strconv.FormatFloat(*o.v, 'g', -1, 64)
}

func (o *optFloat) Set(s string) error {
	v, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
	if err != nil {
		return fmt.Errorf("%q is not a number", s)
	}
	o.v = &v
	return nil
}

// cmdSPC charts a series from a file: halfmark spc --method imr FILE.
func cmdSPC(ctx context.Context, e env) error {
	var (
		method, limits, trendMethod string
		target, sigma, tolerance    optFloat
		p                           spc.Params
		asJSON                      bool
	)
	fs := newFlags(e, "spc", "spc --method imr|ewma|cusum|trend [flags] FILE   (FILE: one value per line, or time,value lines; - reads standard input)")
	fs.StringVar(&method, "method", "imr", "chart: imr (individuals and moving range), ewma, cusum or trend")
	fs.Var(&target, "target", "in-control centre (unit of the values); default: estimated from the first --baseline-points values")
	fs.Var(&sigma, "sigma", "in-control standard deviation; default: MR̄/d2 of the first --baseline-points values")
	fs.IntVar(&p.BaselinePoints, "baseline-points", 0, "values that estimate a missing target or sigma (0: all)")
	fs.Float64Var(&p.K, "k", 0, "cusum: reference value in sigma (default 0.5)")
	fs.Float64Var(&p.H, "h", 0, "cusum: decision interval in sigma (default 5)")
	fs.BoolVar(&p.Reset, "reset", false, "cusum: reset the sums after a signal")
	fs.Float64Var(&p.Lambda, "lambda", 0, "ewma: weight of the newest value (default 0.1)")
	fs.Float64Var(&p.LimitWidth, "limit-width", 0, "imr: limit width L in sigma (default 3); ewma: L (default: the ARL-500 design for lambda)")
	fs.StringVar(&limits, "limits", "exact", "ewma: exact (time-varying) or steady limits")
	fs.StringVar(&trendMethod, "trend-method", "theil-sen", "trend: theil-sen or ols")
	fs.Var(&tolerance, "tolerance", "trend: project when the line reaches target ± tolerance")
	fs.BoolVar(&asJSON, "json", false, "print the chart as JSON")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return exitUsage{fmt.Errorf("give one FILE (or - for standard input); see halfmark spc --help")}
	}
	switch limits {
	case "exact", "steady":
		p.Limits = spc.LimitsChoice(limits)
	default:
		return exitUsage{fmt.Errorf("--limits %q: use exact or steady", limits)}
	}
	switch trendMethod {
	case "theil-sen", "ols":
		p.TrendMethod = spc.TrendMethod(trendMethod)
	default:
		return exitUsage{fmt.Errorf("--trend-method %q: use theil-sen or ols", trendMethod)}
	}
	p.Target, p.Sigma, p.Tolerance = target.v, sigma.v, tolerance.v

	var r io.Reader = e.stdin
	name := fs.Arg(0)
	if name != "-" {
		f, err := os.Open(name)
		if err != nil {
			return err
		}
		defer f.Close()
		r = f
	}
	values, times, err := spc.ParseSeries(r)
	if err != nil {
		return fmt.Errorf("%s: %w", name, err)
	}
	out, err := spc.Run(method, values, times, p)
	if err != nil {
		return err
	}
	if asJSON {
		enc := json.NewEncoder(e.stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(out)
	}
	return printChart(e.stdout, out)
}

// printChart writes a short readable table of a chart.
func printChart(w io.Writer, o spc.Output) error {
	num := func(p *float64) string {
		if p == nil {
			return "—"
		}
		return strconv.FormatFloat(*p, 'f', 4, 64)
	}
	fmt.Fprintf(w, "%s chart, %d points: centre %s, sigma %s, UCL %s, LCL %s\n", o.Chart, o.N, num(o.Centre), num(o.Sigma), num(o.UCL), num(o.LCL))
	if o.SlopePer30d != nil {
		fmt.Fprintf(w, "trend (%s): %s per 30 days, %.0f%% interval %s to %s, significant %v\n",
			o.Method, num(o.SlopePer30d), 100*orZero(o.Confidence), num(o.CILow), num(o.CIHigh), o.Significant != nil && *o.Significant)
		if c := o.Crossing; c != nil {
			at := ""
			if c.At != nil {
				at = " (" + c.At.Format("2006-01-02") + ")"
			}
			fmt.Fprintf(w, "projected to reach the %s limit %.4f in %.1f days%s\n", c.Side, c.Limit, c.DaysAfterLast, at)
		}
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	var head string
	switch o.Chart {
	case spc.MethodIMR:
		head = "#\tvalue\tMR\tsignal\t"
	case spc.MethodEWMA:
		head = "#\tvalue\tz\tLCL\tUCL\tsignal\t"
	case spc.MethodCUSUM:
		head = "#\tvalue\tC+\tC−\tsignal\t"
	default:
		head = "#\tvalue\tfitted\t\t"
	}
	fmt.Fprintln(tw, head)
	for _, p := range o.Points {
		sig := ""
		if p.Signal {
			sig = "*"
			if p.Direction != "" {
				sig += " " + p.Direction
			}
		}
		switch o.Chart {
		case spc.MethodIMR:
			fmt.Fprintf(tw, "%d\t%.4f\t%s\t%s\t\n", p.Index, p.Value, num(p.MR), sig)
		case spc.MethodEWMA:
			lcl, ucl := p.LCL, p.UCL
			if lcl == nil {
				lcl, ucl = o.LCL, o.UCL
			}
			fmt.Fprintf(tw, "%d\t%.4f\t%s\t%s\t%s\t%s\t\n", p.Index, p.Value, num(p.Z), num(lcl), num(ucl), sig)
		case spc.MethodCUSUM:
			fmt.Fprintf(tw, "%d\t%.4f\t%s\t%s\t%s\t\n", p.Index, p.Value, num(p.CPlus), num(p.CMinus), sig)
		default:
			fmt.Fprintf(tw, "%d\t%.4f\t%s\t\t\n", p.Index, p.Value, num(p.Fitted))
		}
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if o.FirstSignal != nil {
		fmt.Fprintf(w, "first signal at point %d\n", *o.FirstSignal)
	} else if o.Chart != spc.MethodTrend {
		fmt.Fprintln(w, "no signal")
	}
	return nil
}

func orZero(p *float64) float64 {
	if p == nil {
		return 0
	}
	return *p
}
