package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"time"

	"halfmark"
)

// importBatch is how many checks one transaction stores.
const importBatch = 1000

func cmdImport(ctx context.Context, e env) error {
	if len(e.args) == 0 || e.args[0] != "checks" {
		fmt.Fprintln(e.stdout, "Usage: halfmark import checks [--skip-bad] [--create-missing] [--dry-run] FILE.csv\n\nThe CSV layout is in the README (\"Importing records\").")
		if len(e.args) > 0 && (e.args[0] == "--help" || e.args[0] == "-h") {
			return errHelp
		}
		return exitUsage{fmt.Errorf("say what to import: halfmark import checks FILE.csv")}
	}
	e.args = e.args[1:]
	var d dbFlags
	var skipBad, createMissing, dryRun bool
	var operator string
	fs := newFlags(e, "import checks", "import checks [flags] FILE.csv")
	d.register(fs)
	fs.BoolVar(&skipBad, "skip-bad", false, "store the good rows and list the bad ones (default: store nothing if any row is bad)")
	fs.BoolVar(&createMissing, "create-missing", false, "create machines (SAD 100 cm) and beams named in the file that do not exist yet")
	fs.BoolVar(&dryRun, "dry-run", false, "validate only; store nothing")
	fs.StringVar(&operator, "as", "import", "name recorded in the audit log as the importer")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return exitUsage{fmt.Errorf("give one CSV file (or - for standard input)")}
	}
	var in io.Reader = e.stdin
	var size int64
	if name := fs.Arg(0); name != "-" {
		f, err := os.Open(name)
		if err != nil {
			return err
		}
		defer f.Close()
		if st, err := f.Stat(); err == nil {
			size = st.Size()
		}
		in = f
	}
	pr := &progressReader{r: in, total: size, w: e.stderr, label: "reading"}
	rows, bad, err := halfmark.ReadChecksCSV(pr, time.Now())
	pr.done()
	if err != nil {
		return err
	}
	st, err := openStore(ctx, e, d, e.stderr)
	if err != nil {
		return err
	}
	defer st.Close()
	actor := halfmark.Actor{Name: "cli:" + operator, Role: halfmark.RoleAdmin}
	res := resolver{ctx: ctx, st: st, actor: actor, create: createMissing && !dryRun}
	nRows := len(rows) + len(bad)
	checks, lines, bad2 := halfmark.GroupCSVRows(rows, res.resolve)
	bad = append(bad, bad2...)
	// Validate the grouped checks against the store (projection, beams).
	if err := st.ValidateChecks(ctx, checks, "checks"); err != nil {
		if he, ok := err.(*halfmark.Error); ok && he.Code == halfmark.EInvalid {
			bad = append(bad, mapCheckErrors(he.Fields, lines)...)
			checks, lines = dropBad(checks, lines, he.Fields)
		} else {
			return err
		}
	}
	sortByLine(bad)
	fmt.Fprintf(e.stderr, "%d rows read: %d bad; %d checks to store\n", nRows, len(bad), len(checks))
	if len(bad) > 0 {
		for _, b := range bad {
			fmt.Fprintf(e.stdout, "bad row: %s\n", b.String())
		}
		if !skipBad {
			return fmt.Errorf("%d bad row(s); nothing was stored. Fix them, or use --skip-bad to store the good rows", len(bad))
		}
	}
	if dryRun {
		fmt.Fprintf(e.stdout, "dry run: %d checks would be stored\n", len(checks))
		return nil
	}
	created, existing := 0, 0
	start := time.Now()
	for i := 0; i < len(checks); i += importBatch {
		j := min(i+importBatch, len(checks))
		r, err := st.RecordBatch(ctx, actor, checks[i:j])
		if err != nil {
			return fmt.Errorf("storing checks %d–%d (file lines %d–%d): %w; the %d checks before them are stored; a re-run stores only what is missing",
				i+1, j, lines[i][0], lines[j-1][len(lines[j-1])-1], err, i)
		}
		created += r.Created
		existing += r.Existing
		fmt.Fprintf(e.stderr, "\rstoring: %d/%d checks (%.0f%%)", j, len(checks), 100*float64(j)/float64(len(checks)))
	}
	if len(checks) > 0 {
		fmt.Fprintln(e.stderr)
	}
	fmt.Fprintf(e.stdout, "imported: %d new checks, %d already stored, %d bad rows skipped (%.1f s)\n",
		created, existing, len(bad), time.Since(start).Seconds())
	return nil
}

// resolver maps machine names and beam labels to ids, creating them when
// allowed.
type resolver struct {
	ctx    context.Context
	st     *store
	actor  halfmark.Actor
	create bool
	cache  map[string][2]int64
}

func (r *resolver) resolve(machine, beam string) (int64, int64, error) {
	if r.cache == nil {
		r.cache = map[string][2]int64{}
	}
	energy, fff, err := halfmark.ParseBeamLabel(beam)
	if err != nil {
		return 0, 0, err
	}
	key := machine + "\x00" + halfmark.BeamLabel(energy, fff)
	if v, ok := r.cache[key]; ok {
		return v[0], v[1], nil
	}
	m, err := r.st.MachineByName(r.ctx, machine)
	if halfmark.ErrorCodeOf(err) == halfmark.ENotFound && r.create {
		m = halfmark.Machine{Name: machine, SADcm: 100, Clinical: true}
		err = r.st.CreateMachine(r.ctx, r.actor, &m)
	}
	if err != nil {
		if halfmark.ErrorCodeOf(err) == halfmark.ENotFound {
			return 0, 0, fmt.Errorf("machine %q does not exist; create it first (POST /api/v1/machines) or use --create-missing", machine)
		}
		return 0, 0, err
	}
	bs, err := r.st.Beams(r.ctx, m.ID)
	if err != nil {
		return 0, 0, err
	}
	for _, b := range bs {
		if b.EnergyMV == energy && b.FFF == fff {
			r.cache[key] = [2]int64{m.ID, b.ID}
			return m.ID, b.ID, nil
		}
	}
	if !r.create {
		return 0, 0, fmt.Errorf("machine %q has no %s beam; add it first or use --create-missing", machine, halfmark.BeamLabel(energy, fff))
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: energy, FFF: fff}
	if err := r.st.CreateBeam(r.ctx, r.actor, &b); err != nil {
		return 0, 0, err
	}
	r.cache[key] = [2]int64{m.ID, b.ID}
	return m.ID, b.ID, nil
}
