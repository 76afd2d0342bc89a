package main

import (
	"bufio"
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"halfmark"
	"halfmark/analysis/sheet"
)

func cmdExport(ctx context.Context, e env) error {
	if len(e.args) == 0 || e.args[0] != "checks" {
		fmt.Fprintln(e.stdout, "Usage: halfmark export checks [--machine NAME|ID] [--from DATE] [--to DATE] [--format csv|xlsx] FILE\n\nWrites every check, one row per edge result, in the long layout `halfmark import checks` reads.")
		if len(e.args) > 0 && (e.args[0] == "--help" || e.args[0] == "-h") {
			return errHelp
		}
		return exitUsage{fmt.Errorf("say what to export: halfmark export checks FILE.csv")}
	}
	e.args = e.args[1:]
	var d dbFlags
	var machine, from, to, format string
	fs := newFlags(e, "export checks", "export checks [flags] FILE")
	d.register(fs)
	fs.StringVar(&machine, "machine", "", "only this machine (name or id)")
	fs.StringVar(&from, "from", "", "only checks measured at or after this time (2024-01-01 or RFC 3339)")
	fs.StringVar(&to, "to", "", "only checks measured before this time (2025-01-01 or RFC 3339)")
	fs.StringVar(&format, "format", "", "csv or xlsx (default: from the file name, else csv)")
	if err := parseFlags(fs, e); err != nil {
		return err
	}
	if fs.NArg() != 1 {
		return exitUsage{fmt.Errorf("give one output file (- for standard output)")}
	}
	name := fs.Arg(0)
	if format == "" {
		format = "csv"
		if strings.EqualFold(filepath.Ext(name), ".xlsx") {
			format = "xlsx"
		}
	}
	if format != "csv" && format != "xlsx" {
		return exitUsage{fmt.Errorf("--format %s: use csv or xlsx", format)}
	}
	var f halfmark.CheckFilter
	var err error
	if f.From, err = flagTime("from", from); err != nil {
		return err
	}
	if f.To, err = flagTime("to", to); err != nil {
		return err
	}
	st, err := openStore(ctx, e, d, e.stderr)
	if err != nil {
		return err
	}
	defer st.Close()
	if machine != "" {
		if id, err := strconv.ParseInt(machine, 10, 64); err == nil {
			f.MachineID = id
			_, err = st.Machine(ctx, id)
			if err != nil {
				return err
			}
		} else {
			m, err := st.MachineByName(ctx, machine)
			if err != nil {
				return err
			}
			f.MachineID = m.ID
		}
	}
	cs, err := st.ExportChecks(ctx, f)
	if err != nil {
		return err
	}
	var w io.Writer = e.stdout
	var out *os.File
	if name != "-" {
		if out, err = os.Create(name); err != nil {
			return err
		}
		defer out.Close()
		w = out
	}
	bw := bufio.NewWriter(w)
	if format == "xlsx" {
		err = sheet.WriteXLSX(bw, cs)
	} else {
		err = sheet.WriteCSV(bw, cs)
	}
	if err == nil {
		err = bw.Flush()
	}
	if err == nil && out != nil {
		err = out.Close()
	}
	if err != nil {
		return err
	}
	edges := 0
	for _, c := range cs {
		edges += len(c.Check.Edges)
	}
	fmt.Fprintf(e.stderr, "exported: %d checks, %d edge results (%s)\n", len(cs), edges, format)
	return nil
}

// flagTime reads a --from/--to value: a date (midnight UTC) or RFC 3339.
func flagTime(name, s string) (time.Time, error) {
	if s == "" {
		return time.Time{}, nil
	}
	for _, l := range []string{time.RFC3339, time.DateOnly} {
		if t, err := time.Parse(l, s); err == nil {
			return t, nil
		}
	}
	return time.Time{}, exitUsage{fmt.Errorf("--%s %s: give a date such as 2024-01-01 or an RFC 3339 time", name, s)}
}
