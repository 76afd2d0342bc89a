package halfmark

import (
	"errors"
	"fmt"
	"sort"
	"strings"
	"time"
)

// ImportOrigin is where an imported edge result came from: the XLSX sheet
// ("" for text files) and the 1-based line (text) or row number (XLSX).
type ImportOrigin struct {
	Sheet string
	Line  int
}

func (o ImportOrigin) String() string {
	if o.Sheet != "" {
		return fmt.Sprintf("sheet %q line %d", o.Sheet, o.Line)
	}
	return fmt.Sprintf("line %d", o.Line)
}

// ImportRefused is one imported row (or sheet) that was not read or not
// stored, and why.
type ImportRefused struct {
	Sheet  string
	Line   int
	Column string // the column title, or "constant FIELD"; "" for the whole row
	Reason string
}

func (r ImportRefused) String() string {
	var b strings.Builder
	if r.Sheet != "" {
		fmt.Fprintf(&b, "sheet %q ", r.Sheet)
	}
	fmt.Fprintf(&b, "line %d: ", r.Line)
	if r.Column != "" {
		b.WriteString(r.Column + ": ")
	}
	b.WriteString(r.Reason)
	return b.String()
}

// SortImportRefused puts refused rows in sheet and line order, keeping the
// order of refusals of the same row.
func SortImportRefused(rs []ImportRefused) {
	sort.SliceStable(rs, func(i, j int) bool {
		if rs[i].Sheet != rs[j].Sheet {
			return rs[i].Sheet < rs[j].Sheet
		}
		return rs[i].Line < rs[j].Line
	})
}

// ImportResolve maps a machine name and beam label, as written in an
// imported file, to stored ids; err refuses the row.
type ImportResolve func(machine, beam string) (machineID, beamID int64, err error)

// ImportPair is a machine name and a beam label as written in an imported
// file.
type ImportPair struct {
	Machine, Beam string
}

// ImportResolution is what the store made of the machine names and beam
// labels of an import: their ids (negative in a dry run: would be
// created), or why the rows naming them are refused.
type ImportResolution struct {
	IDs      map[ImportPair][2]int64 // machine id, beam id
	Refused  map[ImportPair]string   // reason the rows of the pair are refused
	Machines map[int64]string        // machine id → name
	Beams    map[int64]string        // beam id → label
	Create   []string                // what is (or would be) created: "machine Tern (SAD 100 cm)", "beam Tern 6 MV"
}

// Resolve is the ImportResolve of the resolution; a pair it does not know
// is refused.
func (r *ImportResolution) Resolve(machine, beam string) (int64, int64, error) {
	p := ImportPair{machine, beam}
	if ids, ok := r.IDs[p]; ok {
		return ids[0], ids[1], nil
	}
	if why, ok := r.Refused[p]; ok {
		return 0, 0, errors.New(why)
	}
	return 0, 0, fmt.Errorf("machine %q, beam %q was not resolved; resolve every pair of the file first", machine, beam)
}

// ImportBatch is an import's rows grouped into checks, ready for the
// store: checks with their machine and beam ids resolved and their ids
// set, Origins[i][j] where edge j of Checks[i] came from, and the rows
// refused while reading and grouping.
type ImportBatch struct {
	Read    int // data rows read, good and refused
	Checks  []Check
	Origins [][]ImportOrigin
	Refused []ImportRefused
}

// ImportOptions say how imported rows are stored.
type ImportOptions struct {
	CreateMissing bool                  // create machines (SAD 100 cm) and beams that do not exist
	DryRun        bool                  // validate only: store nothing, create nothing
	SkipBad       bool                  // store the good checks when some rows are refused
	Progress      func(done, total int) // called after each stored batch; may be nil
}

// ImportReport says what an import did or, in a dry run, would do.
type ImportReport struct {
	Read     int              // data rows read
	Checks   []Check          // the checks stored (or to be stored), ids resolved
	Origins  [][]ImportOrigin // Origins[i][j]: where edge j of Checks[i] came from
	Refused  []ImportRefused  // rows not stored, in file order
	Machines map[int64]string // machine id → name (negative ids: would be created)
	Beams    map[int64]string // beam id → label
	Create   []string         // what is (or would be) created: "machine Tern", "beam Tern 6 MV"
	Created  int              // new checks stored
	Existing int              // checks already stored (re-import)
	Stored   bool             // whether anything was written
}

// ExportCheck is one stored check with its machine's name and its beam's
// label, as an export writes it.
type ExportCheck struct {
	Machine string
	Beam    string
	Check   StoredCheck
}

// ImportCount is the number of checks for one machine, beam and kind.
type ImportCount struct {
	Machine, Beam string
	Kind          CheckKind
	Checks, Edges int
}

// Counts are the checks per machine, beam and kind, sorted.
func (r *ImportReport) Counts() []ImportCount {
	idx := map[[3]string]int{}
	var out []ImportCount
	for _, c := range r.Checks {
		k := [3]string{r.Machines[c.MachineID], r.Beams[c.BeamID], string(c.Kind)}
		i, ok := idx[k]
		if !ok {
			i = len(out)
			idx[k] = i
			out = append(out, ImportCount{Machine: k[0], Beam: k[1], Kind: c.Kind})
		}
		out[i].Checks++
		out[i].Edges += len(c.Edges)
	}
	sort.Slice(out, func(i, j int) bool {
		a, b := out[i], out[j]
		if a.Machine != b.Machine {
			return a.Machine < b.Machine
		}
		if a.Beam != b.Beam {
			return a.Beam < b.Beam
		}
		return a.Kind < b.Kind
	})
	return out
}

// Span is the earliest and latest measurement time of the checks.
func (r *ImportReport) Span() (first, last time.Time) {
	for i, c := range r.Checks {
		if i == 0 || c.MeasuredAt.Before(first) {
			first = c.MeasuredAt
		}
		if i == 0 || c.MeasuredAt.After(last) {
			last = c.MeasuredAt
		}
	}
	return first, last
}
