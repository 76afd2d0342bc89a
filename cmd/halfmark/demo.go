package main

import (
	"context"
	"fmt"
	"sort"
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
		where := f.db.dataDir
		if f.db.url != "" || e.getenv("DATABASE_URL") != "" {
			where = "the database given"
		}
		fmt.Fprintln(e.stdout, "Everything shown is invented demo data. Ctrl-C stops the demo; its data stay in", where)
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

// printPicture prints the front page as text: each machine's level and
// its active findings, one line each, as the drift engine decided them.
func printPicture(ctx context.Context, st *store, e env) error {
	status, err := st.Status(ctx)
	if err != nil {
		return err
	}
	fs, err := st.Findings(ctx, halfmark.FindingFilter{State: "active"})
	if err != nil {
		return err
	}
	byMachine := map[int64][]halfmark.Finding{}
	for _, f := range fs {
		byMachine[f.MachineID] = append(byMachine[f.MachineID], f)
	}
	sort.SliceStable(status, func(i, j int) bool { return status[i].Level > status[j].Level })
	fmt.Fprintln(e.stdout, "\nWhat the dashboard shows first (one line per finding: one physical fault each):")
	for _, m := range status {
		fmt.Fprintf(e.stdout, "  %-7s %s\n", m.Name, m.Level.String())
		for _, f := range byMachine[m.ID] {
			line := fmt.Sprintf("      %s %s %s: %+.2f mm (95%% CI %+.2f to %+.2f)", f.Level.String(), f.Kind, f.Name,
				f.MagnitudeMM, f.MagnitudeCIMM[0], f.MagnitudeCIMM[1])
			switch {
			case f.Crossing.Status == halfmark.CrossingProjected && f.Crossing.ToleranceDate != nil:
				line += ", tolerance reached about " + f.Crossing.ToleranceDate.Format(time.DateOnly)
			case f.Crossing.Status == halfmark.CrossingAlreadyBeyond:
				line += ", beyond tolerance now"
			}
			if f.Cause != nil {
				line += ", likely cause: " + f.Cause.Kind
			}
			fmt.Fprintln(e.stdout, line)
		}
	}
	return nil
}
