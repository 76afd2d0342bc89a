package sheet

import (
	"sort"
	"time"

	"halfmark"
)

// ImportOptions say how read rows are stored.
type ImportOptions struct {
	CreateMissing bool                  // create machines (SAD 100 cm) and beams that do not exist
	DryRun        bool                  // validate only: store nothing, create nothing
	SkipBad       bool                  // store the good checks when some rows are refused
	Progress      func(done, total int) // called after each stored batch; may be nil
}

// ImportReport says what an import did or, in a dry run, would do.
type ImportReport struct {
	Read     int              // data rows read
	Checks   []halfmark.Check // the checks stored (or to be stored), ids resolved
	Origins  [][]Origin       // Origins[i][j]: where edge j of Checks[i] came from
	Refused  []Refused        // rows not stored, in file order
	Machines map[int64]string // machine id → name (negative ids: would be created)
	Beams    map[int64]string // beam id → label
	Create   []string         // what is (or would be) created: "machine Tern", "beam Tern 6 MV"
	Created  int              // new checks stored
	Existing int              // checks already stored (re-import)
	Stored   bool             // whether anything was written
}

// Count is the number of checks for one machine, beam and kind.
type Count struct {
	Machine, Beam string
	Kind          halfmark.CheckKind
	Checks, Edges int
}

// Counts are the checks per machine, beam and kind, sorted.
func (r *ImportReport) Counts() []Count {
	idx := map[[3]string]int{}
	var out []Count
	for _, c := range r.Checks {
		k := [3]string{r.Machines[c.MachineID], r.Beams[c.BeamID], string(c.Kind)}
		i, ok := idx[k]
		if !ok {
			i = len(out)
			idx[k] = i
			out = append(out, Count{Machine: k[0], Beam: k[1], Kind: c.Kind})
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

// SortRefused puts refused rows in sheet and line order.
func SortRefused(rs []Refused) {
	sort.SliceStable(rs, func(i, j int) bool {
		if rs[i].Sheet != rs[j].Sheet {
			return rs[i].Sheet < rs[j].Sheet
		}
		return rs[i].Line < rs[j].Line
	})
}
