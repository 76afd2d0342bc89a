package sheet

import (
	"crypto/sha1"
	"fmt"
	"strconv"
	"strings"
	"time"

	"halfmark"
)

// Origin is where an edge result came from (halfmark.ImportOrigin).
type Origin = halfmark.ImportOrigin

// Pairs are the distinct machine names and beam labels of the rows, as
// written, in the order they first appear: what the store resolves before
// Batch groups the rows.
func Pairs(rows []Row) []halfmark.ImportPair {
	seen := map[halfmark.ImportPair]bool{}
	var out []halfmark.ImportPair
	for _, r := range rows {
		p := halfmark.ImportPair{Machine: r.Machine, Beam: r.Beam}
		if !seen[p] {
			seen[p] = true
			out = append(out, p)
		}
	}
	return out
}

// Batch groups the rows read into checks (Group) with the store's
// resolution of their machines and beams, for the store's import; its
// refused rows are those of reading, then those of grouping.
func (r *Result) Batch(resolve halfmark.ImportResolve) halfmark.ImportBatch {
	checks, origins, refused := Group(r.Rows, resolve)
	return halfmark.ImportBatch{Read: r.Read, Checks: checks, Origins: origins,
		Refused: append(append([]Refused{}, r.Refused...), refused...)}
}

// Group joins rows into checks. resolve maps a machine name and beam
// label to ids. Rows that share machine, beam, kind, time, setup, device
// and operator (or that carry the same id) form one check, whose id is a
// name-based UUID of that key (RFC 9562 §5.5), so importing the same file
// twice — long or wide, text or workbook — stores nothing new.
// origins[i][j] is where edge j of checks[i] came from.
func Group(rows []Row, resolve halfmark.ImportResolve) (checks []halfmark.Check, origins [][]Origin, refused []Refused) {
	index := map[string]int{}
	for _, r := range rows {
		mID, bID, err := resolve(r.Machine, r.Beam)
		if err != nil {
			refused = append(refused, Refused{Sheet: r.Sheet, Line: r.Line, Reason: err.Error()})
			continue
		}
		c := r.Check
		key := RowKey(r.Machine, bID, &c)
		i, ok := index[key]
		if !ok {
			if c.ID == "" {
				c.ID = uuidV5(importNamespace, key)
			}
			c.MachineID, c.BeamID = mID, bID
			c.Edges = nil
			i = len(checks)
			index[key] = i
			checks = append(checks, c)
			origins = append(origins, nil)
		}
		for _, e := range r.Check.Edges {
			dup := -1
			for j, have := range checks[i].Edges {
				if have.Edge == e.Edge {
					dup = j
				}
			}
			if dup >= 0 {
				o := origins[i][dup]
				refused = append(refused, Refused{Sheet: r.Sheet, Line: r.Line, Column: "edge", Reason: fmt.Sprintf(
					"%s is given twice for the same check (%s, %s, %s, %s); the first is on %s",
					e.Edge, r.Machine, r.Beam, c.Kind, c.MeasuredAt.Format(time.RFC3339), o)})
				continue
			}
			checks[i].Edges = append(checks[i].Edges, e)
			origins[i] = append(origins[i], Origin{Sheet: r.Sheet, Line: r.Line})
		}
		if r.Check.Note != "" && checks[i].Note == "" {
			checks[i].Note = r.Check.Note
		}
	}
	return checks, origins, refused
}

// RowKey is the grouping key of a row: its explicit id, or machine name,
// beam id, kind, time, setup, device and operator.
func RowKey(machine string, beamID int64, c *halfmark.Check) string {
	if c.ID != "" {
		return "id\x1f" + c.ID
	}
	return strings.Join([]string{machine, strconv.FormatInt(beamID, 10), string(c.Kind),
		c.MeasuredAt.UTC().Format(time.RFC3339Nano), c.Setup.Geometry(), fnum(c.Setup.SSDcm), fnum(c.Setup.DepthCm),
		c.Device, c.Operator}, "\x1f")
}

func fnum(p *float64) string {
	if p == nil {
		return ""
	}
	return strconv.FormatFloat(*p, 'f', -1, 64)
}

// importNamespace is the UUID namespace of imported checks (a random
// constant; unchanged since the first importer, so files imported before
// keep their ids).
var importNamespace = [16]byte{0x6a, 0x1f, 0x3c, 0x52, 0x9e, 0x07, 0x4b, 0x8d, 0xa1, 0x44, 0x2e, 0x90, 0x5b, 0x7c, 0xd3, 0x18}

// uuidV5 is a name-based UUID (RFC 9562 §5.5: SHA-1 of namespace + name).
func uuidV5(ns [16]byte, name string) string {
	h := sha1.New()
	h.Write(ns[:])
	h.Write([]byte(name))
	var u [16]byte
	copy(u[:], h.Sum(nil))
	u[6] = u[6]&0x0f | 0x50
	u[8] = u[8]&0x3f | 0x80
	return fmt.Sprintf("%x-%x-%x-%x-%x", u[0:4], u[4:6], u[6:8], u[8:10], u[10:16])
}
