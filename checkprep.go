package halfmark

import (
	"crypto/rand"
	"fmt"
	"strings"
	"time"
)

// MachineLookup returns a machine with its beams; found is false for an
// unknown id. The store supplies it; ValidateChecks calls it once per
// machine.
type MachineLookup func(id int64) (m Machine, beams []Beam, found bool, err error)

// ValidateChecks is the one validation of checks before they are stored,
// used by every path (API, dashboard, import, recompute): each check's own
// rules (Check.Validate), its machine and beam (through lookup), MLC edges
// only on a machine with an MLC and within its leaf pairs, the corrections
// within the batch (a check may not correct itself, two checks may not
// correct the same one, corrections may not form a cycle, and a correction
// of a check in the same batch must be of the same machine and beam), and
// unique ids. It sets missing ids (random UUIDs), lower-cases ids and
// projects every edge to the isocentre plane with the machine's SAD. The
// store's own rules (a corrected check must exist, belong to the same
// machine and beam, and not be corrected yet) are checked where the checks
// are written. prefix names the array in field errors ("checks"); "" for
// one check. An error is an EInvalid *Error with every field error, or the
// lookup's error.
func ValidateChecks(cs []Check, prefix string, now time.Time, lookup MachineLookup) error {
	var f Fields
	type machine struct {
		m     Machine
		beams map[int64]bool
		found bool
	}
	machines := map[int64]*machine{}
	ids := make(map[string]int, len(cs))
	pfx := func(i int) string {
		if prefix == "" {
			return ""
		}
		return fmt.Sprintf("%s[%d].", prefix, i)
	}
	for i := range cs {
		c := &cs[i]
		p := pfx(i)
		f = append(f, c.Validate(p, now)...)
		if c.MachineID > 0 {
			mm, ok := machines[c.MachineID]
			if !ok {
				m, beams, found, err := lookup(c.MachineID)
				if err != nil {
					return err
				}
				mm = &machine{m: m, found: found, beams: map[int64]bool{}}
				for _, b := range beams {
					mm.beams[b.ID] = true
				}
				machines[c.MachineID] = mm
			}
			if !mm.found {
				f.Add(p+"machine_id", "machine %d does not exist (see GET /api/v1/machines)", c.MachineID)
			} else {
				m := mm.m
				if c.BeamID > 0 && !mm.beams[c.BeamID] {
					f.Add(p+"beam_id", "beam %d is not a beam of machine %d (%s); see GET /api/v1/machines/%d/beams", c.BeamID, m.ID, m.Name, m.ID)
				}
				f = append(f, c.checkLeaves(m, p)...)
				if err := c.ProjectToIsocentre(m.SADcm); err != nil {
					f.Add(p+"setup", "cannot project to the isocentre plane: %v", err)
				}
			}
		}
		if c.ID == "" {
			c.ID = NewUUID()
		}
		c.ID = strings.ToLower(c.ID)
		c.Supersedes = strings.ToLower(c.Supersedes)
		if j, dup := ids[c.ID]; dup {
			f.Add(p+"id", "repeats the id of %s[%d]; each check needs its own id", prefix, j)
		}
		ids[c.ID] = i
	}
	f = append(f, checkCorrections(cs, ids, pfx)...)
	return f.Err("the check is not valid; nothing was stored")
}

// checkCorrections applies the rules of corrections within one batch.
func checkCorrections(cs []Check, ids map[string]int, pfx func(int) string) Fields {
	var f Fields
	target := map[string]int{} // corrected id → index of its correction
	for i := range cs {
		c := &cs[i]
		if c.Supersedes == "" {
			continue
		}
		p := pfx(i)
		if c.Supersedes == c.ID {
			f.Add(p+"supersedes", "names this check itself; a correction names the earlier check it corrects")
			continue
		}
		if j, dup := target[c.Supersedes]; dup {
			f.Add(p+"supersedes", "check %s is already corrected by %s[%d] of this batch; a check is corrected once (correct the correction instead)", c.Supersedes, strings.TrimSuffix(pfx(j), "."), j)
			continue
		}
		target[c.Supersedes] = i
		if j, ok := ids[c.Supersedes]; ok {
			o := &cs[j]
			if o.MachineID != c.MachineID || o.BeamID != c.BeamID {
				f.Add(p+"supersedes", "names a check of machine %d beam %d; a correction must be of the same machine and beam (%d, %d)", o.MachineID, o.BeamID, c.MachineID, c.BeamID)
			}
		}
	}
	// A cycle: following supersedes from a check within the batch comes
	// back to it.
	reported := map[string]bool{}
	for i := range cs {
		seen := map[string]bool{}
		id := cs[i].ID
		for id != "" && !seen[id] {
			seen[id] = true
			j, ok := ids[id]
			if !ok {
				break
			}
			id = cs[j].Supersedes
		}
		if id != "" && id == cs[i].ID && cs[i].Supersedes != cs[i].ID && !reported[id] {
			for k := range seen {
				reported[k] = true
			}
			f.Add(pfx(i)+"supersedes", "forms a cycle of corrections within the batch (%d checks correcting each other); a correction names an earlier check", len(seen))
		}
	}
	return f
}

// checkLeaves refuses MLC edges on a machine without an MLC and leaf pairs
// beyond the machine's count.
func (c *Check) checkLeaves(m Machine, prefix string) Fields {
	var f Fields
	for i, e := range c.Edges {
		id, err := ParseEdge(e.Edge)
		if err != nil || id.Jaw != "" {
			continue
		}
		field := fmt.Sprintf("%sedges[%d].edge", prefix, i)
		switch {
		case m.MLCLeafPairs == 0:
			f.Add(field, "%s is an MLC leaf, but machine %s has no MLC (mlc_leaf_pairs 0)", e.Edge, m.Name)
		case id.LeafPair > m.MLCLeafPairs:
			f.Add(field, "%s names leaf pair %d, but machine %s has %d leaf pairs", e.Edge, id.LeafPair, m.Name, m.MLCLeafPairs)
		}
	}
	return f
}

// ProjectToIsocentre sets each edge's isocentre-plane position from its
// measured one (and the light-field edge's likewise):
//
//	x_iso = x · SAD / (SSD + depth)
//
// (similar triangles from the source; common practice). A setup at the isocentre projects with SSD = SAD
// and depth 0, i.e. unchanged. SAD and SSD are in cm, positions in mm.
func (c *Check) ProjectToIsocentre(sadCm float64) error {
	ssd, depth := sadCm, 0.0
	if !c.Setup.AtIsocentre() {
		ssd, depth = deref(c.Setup.SSDcm, sadCm), deref(c.Setup.DepthCm, 0)
	}
	if !finite(sadCm) || sadCm <= 0 || !finite(ssd) || ssd <= 0 || !finite(depth) || depth < 0 {
		return fmt.Errorf("SAD %v cm, SSD %v cm and depth %v cm must be positive (depth may be 0)", sadCm, ssd, depth)
	}
	scale := sadCm / (ssd + depth)
	for i := range c.Edges {
		e := &c.Edges[i]
		e.IsoPositionMM = e.PositionMM * scale
		if e.LightPositionMM != nil {
			v := *e.LightPositionMM * scale
			e.IsoLightPositionMM = &v
		}
	}
	return nil
}

// NewUUID returns a random (version 4) UUID in its 8-4-4-4-12 form. RFC
// 9562 §5.4.
func NewUUID() string {
	var b [16]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic(err) // crypto/rand never fails on supported systems
	}
	b[6] = b[6]&0x0f | 0x40
	b[8] = b[8]&0x3f | 0x80
	const hex = "0123456789abcdef"
	out := make([]byte, 0, 36)
	for i, v := range b {
		if i == 4 || i == 6 || i == 8 || i == 10 {
			out = append(out, '-')
		}
		out = append(out, hex[v>>4], hex[v&15])
	}
	return string(out)
}
