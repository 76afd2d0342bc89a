package main

import (
	"context"
	"fmt"
	"sort"
	"strings"
	"time"

	"halfmark"
	"halfmark/deploy/demo"
)

// demoDataDir keeps the demo apart from a real installation's ./halfmark-data.
const demoDataDir = "./halfmark-demo-data"

// cmdDemo loads the invented clinic into an empty database (by default a
// private cluster in ./halfmark-demo-data), evaluates it, and serves the
// dashboard with demo sign-ins.
func cmdDemo(ctx context.Context, e env) error {
	var f serveFlags
	fs := f.register(e, "demo")
	end := fs.String("end", "", "last day of the demo history, YYYY-MM-DD (default: today, up to the present hour)")
	loadOnly := fs.Bool("load-only", false, "load and evaluate the demo, print the picture, and exit without serving")
	// The demo's own default, shown as such by --help.
	dir := fs.Lookup("data-dir")
	dir.DefValue = demoDataDir
	_ = dir.Value.Set(demoDataDir)
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	endDay := time.Now().UTC()
	if *end != "" {
		t, err := time.Parse(time.DateOnly, *end)
		if err != nil {
			return exitUsage{fmt.Errorf("--end %q: use YYYY-MM-DD", *end)}
		}
		endDay = t
	}
	log, err := f.log.logger(e.stderr)
	if err != nil {
		return err
	}
	st, err := openStore(ctx, e, f.db, e.stderr)
	if err != nil {
		return err
	}
	defer st.Close()
	ms, err := st.Machines(ctx)
	if err != nil {
		return err
	}
	switch {
	case len(ms) == 0:
		start := time.Now()
		if err := loadDemo(ctx, st, endDay, e.stderr); err != nil {
			return fmt.Errorf("loading the demo: %w", err)
		}
		wk, err := f.worker.build(e, st, log, nil)
		if err != nil {
			return err
		}
		fmt.Fprintln(e.stderr, "demo: evaluating every series with the drift engine …")
		sum, err := wk.Evaluate(ctx, true)
		if err != nil {
			return err
		}
		fmt.Fprintf(e.stderr, "demo: evaluated %s; loaded in %.0f s\n", sum, time.Since(start).Seconds())
	case isDemo(ms):
		fmt.Fprintln(e.stderr, "demo: the demo clinic is already loaded here; serving it")
	default:
		return fmt.Errorf("the database already holds %d machines that are not the demo's; the demo loads only into an empty database (give another --data-dir, or an empty --database-url)", len(ms))
	}
	if err := printPicture(ctx, st, e); err != nil {
		return err
	}
	if *loadOnly {
		return nil
	}
	return runParts(ctx, e, st, f, log, true, true, func(addr string) {
		fmt.Fprintf(e.stdout, "\nOpen http://%s and sign in as one of the invented staff of %s:\n", addr, demo.Clinic)
		for _, p := range demo.Staff {
			fmt.Fprintf(e.stdout, "  %-32s password %-22s (%s)\n", p.Email, p.Password, p.Name)
		}
		fmt.Fprintln(e.stdout, "Everything shown is invented demo data. Ctrl-C stops the demo; its data stay in", f.db.dataDir)
	})
}

func isDemo(ms []halfmark.Machine) bool {
	want := map[string]bool{}
	for _, m := range demo.Machines() {
		want[m.Machine.Name] = true
	}
	if len(ms) != len(want) {
		return false
	}
	for _, m := range ms {
		if !want[m.Name] {
			return false
		}
	}
	return true
}

// printPicture prints the front page as text: each machine's level, worst
// series and projected crossing.
func printPicture(ctx context.Context, st *store, e env) error {
	status, err := st.Status(ctx)
	if err != nil {
		return err
	}
	sort.SliceStable(status, func(i, j int) bool { return status[i].Level > status[j].Level })
	fmt.Fprintln(e.stdout, "\nWhat the dashboard shows first:")
	for _, m := range status {
		line := fmt.Sprintf("  %-7s %-28s", m.Name, m.Level.String())
		if w := m.Worst; w != nil && m.Level > 0 {
			line += fmt.Sprintf(" %s %s %s", w.BeamLabel, w.Edge, w.Quantity)
			if w.DeviationMM != nil {
				line += fmt.Sprintf(", %+.2f mm from baseline", *w.DeviationMM)
			}
			if w.ToleranceMM != nil {
				line += fmt.Sprintf(" (tolerance ±%.1f mm)", *w.ToleranceMM)
			}
			if w.ProjectedCrossing != nil {
				line += ", projected to cross " + w.ProjectedCrossing.Format(time.DateOnly)
			}
			if w.Rule != "" {
				line += " — " + w.Rule
			}
		}
		if m.OpenAlerts > 0 {
			line += fmt.Sprintf("; %d open alert(s)", m.OpenAlerts)
		}
		fmt.Fprintln(e.stdout, strings.TrimRight(line, " "))
	}
	return nil
}
