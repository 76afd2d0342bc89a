package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"halfmark"
	"halfmark/analysis/sheet"
)

// previewChecks is how many checks a dry run prints as they will be stored.
const previewChecks = 5

func cmdImport(ctx context.Context, e env) error {
	if len(e.args) > 0 && e.args[0] == "suggest" {
		e.args = e.args[1:]
		return cmdImportSuggest(e)
	}
	if len(e.args) == 0 || e.args[0] != "checks" {
		fmt.Fprintln(e.stdout, "Usage: halfmark import checks [--map FILE.toml] [--skip-bad] [--create-missing] [--dry-run] FILE\n       halfmark import suggest FILE > mapping.toml\n\nFILE is CSV/TSV text or an XLSX workbook; the layouts and the mapping file are in the README (\"Importing records\").")
		if len(e.args) > 0 && (e.args[0] == "--help" || e.args[0] == "-h") {
			return errHelp
		}
		return exitUsage{fmt.Errorf("say what to import: halfmark import checks FILE.csv")}
	}
	e.args = e.args[1:]
	var d dbFlags
	var skipBad, createMissing, dryRun bool
	var operator, mapFile, decimal, dateFormat, timezone, sheets string
	fs := newFlags(e, "import checks", "import checks [flags] FILE")
	d.register(fs)
	fs.BoolVar(&skipBad, "skip-bad", false, "store the good rows and list the bad ones (default: store nothing if any row is bad)")
	fs.BoolVar(&createMissing, "create-missing", false, "create machines (SAD 100 cm) and beams named in the file that do not exist yet")
	fs.BoolVar(&dryRun, "dry-run", false, "validate and preview only; store nothing")
	fs.StringVar(&operator, "as", "import", "name recorded in the audit log as the importer")
	fs.StringVar(&mapFile, "map", "", "mapping file (TOML) saying which column holds what; without it the file must be in Halfmark's long layout")
	fs.StringVar(&decimal, "decimal", "", "decimal mark: comma, point or auto (default: the mapping's, else auto)")
	fs.StringVar(&dateFormat, "date-format", "", "how to read slash dates: DD/MM/YYYY or MM/DD/YYYY (never guessed)")
	fs.StringVar(&timezone, "timezone", "", "zone of times written without one (IANA name or Local; default: the mapping's, else the site's local zone with --map, UTC without)")
	fs.StringVar(&sheets, "sheet", "", "XLSX: read only these sheets (comma-separated; default: all, or the mapping's)")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return exitUsage{fmt.Errorf("give one file (CSV, TSV or XLSX; - for standard input)")}
	}
	m := sheet.DefaultMapping()
	opt := sheet.Options{Decimal: strings.ToLower(decimal), DateFormat: strings.ToUpper(dateFormat), Now: time.Now()}
	if mapFile != "" {
		b, err := os.ReadFile(mapFile)
		if err != nil {
			return err
		}
		if m, err = sheet.ParseMapping(b); err != nil {
			return exitUsage{fmt.Errorf("%s: %v", mapFile, err)}
		}
		if m.Timezone == "" {
			opt.Location = time.Local
		}
	}
	switch opt.Decimal {
	case "", sheet.DecimalAuto, sheet.DecimalComma, sheet.DecimalPoint:
	default:
		return exitUsage{fmt.Errorf("--decimal %s: use comma, point or auto", decimal)}
	}
	switch opt.DateFormat {
	case "", sheet.DateDMY, sheet.DateMDY:
	default:
		return exitUsage{fmt.Errorf("--date-format %s: use DD/MM/YYYY or MM/DD/YYYY", dateFormat)}
	}
	if timezone != "" {
		loc, err := time.LoadLocation(timezone)
		if err != nil {
			return exitUsage{fmt.Errorf("--timezone %s: not an IANA time zone such as Europe/Berlin", timezone)}
		}
		opt.Location = loc
	}
	if sheets != "" {
		opt.Sheets = strings.Split(sheets, ",")
	}
	data, err := readImportFile(e, fs.Arg(0))
	if err != nil {
		return err
	}
	res, err := sheet.Read(data, m, opt)
	if err != nil {
		return err
	}
	st, err := openStore(ctx, e, d, e.stderr)
	if err != nil {
		return err
	}
	defer st.Close()
	actor := halfmark.Actor{Name: "cli:" + operator, Role: halfmark.RoleAdmin}
	start := time.Now()
	iopt := halfmark.ImportOptions{CreateMissing: createMissing, DryRun: dryRun, SkipBad: skipBad,
		Progress: func(done, total int) {
			fmt.Fprintf(e.stderr, "\rstoring: %d/%d checks (%.0f%%)", done, total, 100*float64(done)/float64(total))
			if done == total {
				fmt.Fprintln(e.stderr)
			}
		}}
	rz, err := st.ResolveImport(ctx, actor, sheet.Pairs(res.Rows), iopt)
	if err != nil {
		return err
	}
	rep, err := st.ImportChecks(ctx, actor, res.Batch(rz.Resolve), rz, iopt)
	if err != nil {
		return err
	}
	fmt.Fprintf(e.stderr, "%d rows read: %d bad; %d checks to store\n", rep.Read, len(rep.Refused), len(rep.Checks))
	if dryRun {
		printPreview(e.stdout, res, rep)
	}
	for _, b := range rep.Refused {
		fmt.Fprintf(e.stdout, "bad row: %s\n", b)
	}
	if len(rep.Refused) > 0 && !skipBad {
		return fmt.Errorf("%d bad row(s); nothing was stored. Fix them, or use --skip-bad to store the good rows", len(rep.Refused))
	}
	if dryRun {
		fmt.Fprintf(e.stdout, "dry run: %d checks would be stored\n", len(rep.Checks))
		return nil
	}
	fmt.Fprintf(e.stdout, "imported: %d new checks, %d already stored, %d bad rows skipped (%.1f s)\n",
		rep.Created, rep.Existing, len(rep.Refused), time.Since(start).Seconds())
	return nil
}

// readImportFile reads the named file (or standard input for "-") with
// progress on stderr.
func readImportFile(e env, name string) ([]byte, error) {
	var in io.Reader = e.stdin
	var size int64
	if name != "-" {
		f, err := os.Open(name)
		if err != nil {
			return nil, err
		}
		defer f.Close()
		if st, err := f.Stat(); err == nil {
			size = st.Size()
		}
		in = f
	}
	pr := &progressReader{r: in, total: size, w: e.stderr, label: "reading"}
	data, err := io.ReadAll(pr)
	pr.done()
	return data, err
}

// printPreview shows what a dry run would store: how the file was read,
// the first checks as stored, the counts per machine, beam and kind, the
// date range and what would be created.
func printPreview(w io.Writer, res *sheet.Result, rep *sheet.ImportReport) {
	switch res.Format {
	case "xlsx":
		fmt.Fprintf(w, "read: XLSX workbook, sheets %s\n", strings.Join(res.Sheets, ", "))
	default:
		sep := map[rune]string{',': "comma", ';': "semicolon", '\t': "tab"}[res.Separator]
		fmt.Fprintf(w, "read: text, separator %s, decimal %s\n", sep, res.Decimal)
	}
	fmt.Fprintf(w, "first checks as they will be stored:\n")
	for i, c := range rep.Checks {
		if i == previewChecks {
			break
		}
		fmt.Fprintf(w, "  %s | %s | %s | %s | %s", rep.Machines[c.MachineID], rep.Beams[c.BeamID], c.Kind,
			c.MeasuredAt.Format(time.RFC3339), c.Setup.Geometry())
		if c.Device != "" || c.Operator != "" {
			fmt.Fprintf(w, " | %s %s", c.Device, c.Operator)
		}
		for _, e := range c.Edges {
			fmt.Fprintf(w, " | %s %g mm", e.Edge, e.PositionMM)
			if e.PenumbraMM != nil {
				fmt.Fprintf(w, " pen %g mm", *e.PenumbraMM)
			}
			if e.LightPositionMM != nil {
				fmt.Fprintf(w, " light %g mm", *e.LightPositionMM)
			}
		}
		fmt.Fprintln(w)
	}
	fmt.Fprintln(w, "checks per machine, beam and kind:")
	for _, c := range rep.Counts() {
		fmt.Fprintf(w, "  %s | %s | %s: %d checks, %d edge results\n", c.Machine, c.Beam, c.Kind, c.Checks, c.Edges)
	}
	if len(rep.Checks) > 0 {
		first, last := rep.Span()
		fmt.Fprintf(w, "date range: %s to %s\n", first.Format(time.RFC3339), last.Format(time.RFC3339))
	}
	for _, c := range rep.Create {
		fmt.Fprintf(w, "would create: %s\n", c)
	}
}
