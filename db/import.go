package db

import (
	"context"
	"fmt"
	"regexp"
	"strconv"

	"halfmark"
)

// importBatch is how many checks one import transaction stores.
const importBatch = 1000

// ResolveImport resolves the machine names and beam labels of an import
// (sheet.Pairs), in order, creating the missing ones when asked; in a dry
// run it creates nothing and gives the ones it would create negative ids.
// A pair that cannot be resolved is in the resolution's Refused with the
// reason; the error is set only when the store fails.
func (d *DB) ResolveImport(ctx context.Context, a halfmark.Actor, pairs []halfmark.ImportPair, opt halfmark.ImportOptions) (*halfmark.ImportResolution, error) {
	rz := &halfmark.ImportResolution{IDs: map[halfmark.ImportPair][2]int64{}, Refused: map[halfmark.ImportPair]string{},
		Machines: map[int64]string{}, Beams: map[int64]string{}}
	rv := &resolver{d: d, ctx: ctx, actor: a, create: opt.CreateMissing, dry: opt.DryRun, rz: rz}
	for _, p := range pairs {
		m, b, err := rv.resolve(p.Machine, p.Beam)
		if rv.err != nil {
			return rz, rv.err
		}
		if err != nil {
			rz.Refused[p] = err.Error()
			continue
		}
		rz.IDs[p] = [2]int64{m, b}
	}
	return rz, nil
}

// ImportChecks validates grouped checks (sheet.Result.Batch, with the ids
// of ResolveImport's resolution rz) against the store and stores them in
// batches of importBatch checks, one transaction each, through
// RecordBatch. Re-importing stores nothing new (row-key ids, see
// sheet.Group); an interrupted import is completed by running it again.
// With refused rows nothing is stored unless SkipBad; a dry run stores
// nothing and lists what it would create. The error is set only when
// storing fails; the report then says how far it got.
func (d *DB) ImportChecks(ctx context.Context, a halfmark.Actor, in halfmark.ImportBatch, rz *halfmark.ImportResolution, opt halfmark.ImportOptions) (*halfmark.ImportReport, error) {
	rep := &halfmark.ImportReport{Read: in.Read, Machines: rz.Machines, Beams: rz.Beams, Create: rz.Create}
	checks := append([]halfmark.Check(nil), in.Checks...)
	origins := in.Origins
	refused := append([]halfmark.ImportRefused(nil), in.Refused...)
	// Checks on machines that would be created are validated without the store.
	var known []int
	for i := range checks {
		if checks[i].MachineID > 0 && checks[i].BeamID > 0 {
			known = append(known, i)
			continue
		}
		c := checks[i]
		c.MachineID, c.BeamID = 1, 1
		for _, f := range c.Validate(fmt.Sprintf("checks[%d].", i), d.Now()) {
			refused = append(refused, refusedAt(f, i, origins))
		}
	}
	sub := make([]halfmark.Check, len(known))
	for j, i := range known {
		sub[j] = checks[i]
	}
	bad := map[int]bool{}
	if err := d.ValidateChecks(ctx, sub, "checks"); err != nil {
		he, ok := err.(*halfmark.Error)
		if !ok || he.Code != halfmark.EInvalid {
			return rep, err
		}
		for _, f := range he.Fields {
			m := checkField.FindStringSubmatch(f.Field)
			if m == nil {
				refused = append(refused, halfmark.ImportRefused{Reason: f.String()})
				continue
			}
			j, _ := strconv.Atoi(m[1])
			bad[known[j]] = true
			refused = append(refused, refusedAt(f, known[j], origins))
		}
	}
	for j, i := range known {
		checks[i] = sub[j]
	}
	var keep []halfmark.Check
	var keepO [][]halfmark.ImportOrigin
	for i := range checks {
		if !bad[i] && (checks[i].MachineID > 0 || opt.DryRun) {
			keep = append(keep, checks[i])
			keepO = append(keepO, origins[i])
		}
	}
	halfmark.SortImportRefused(refused)
	rep.Checks, rep.Origins, rep.Refused = keep, keepO, refused
	if (len(refused) > 0 && !opt.SkipBad) || opt.DryRun {
		return rep, nil
	}
	for i := 0; i < len(keep); i += importBatch {
		j := min(i+importBatch, len(keep))
		r, err := d.RecordBatch(ctx, a, keep[i:j])
		if err != nil {
			last := keepO[j-1][len(keepO[j-1])-1]
			return rep, fmt.Errorf("storing checks %d–%d (%s to %s): %w; the %d checks before them are stored; a re-run stores only what is missing",
				i+1, j, keepO[i][0], last, err, i)
		}
		rep.Created += r.Created
		rep.Existing += r.Existing
		rep.Stored = rep.Stored || r.Created > 0
		if opt.Progress != nil {
			opt.Progress(j, len(keep))
		}
	}
	return rep, nil
}

var checkField = regexp.MustCompile(`^checks\[(\d+)\]\.(?:edges\[(\d+)\]\.)?(.*)$`)

// refusedAt turns a field error of checks[i] back into the row it came
// from.
func refusedAt(f halfmark.FieldError, i int, origins [][]halfmark.ImportOrigin) halfmark.ImportRefused {
	m := checkField.FindStringSubmatch(f.Field)
	if m == nil || i >= len(origins) || len(origins[i]) == 0 {
		return halfmark.ImportRefused{Column: f.Field, Reason: f.Message}
	}
	o := origins[i][0]
	if m[2] != "" {
		if j, _ := strconv.Atoi(m[2]); j < len(origins[i]) {
			o = origins[i][j]
		}
	}
	return halfmark.ImportRefused{Sheet: o.Sheet, Line: o.Line, Column: m[3], Reason: f.Message}
}

// resolver maps machine names and beam labels to ids, creating them when
// allowed; in a dry run it gives the ones it would create negative ids.
type resolver struct {
	d      *DB
	ctx    context.Context
	actor  halfmark.Actor
	create bool
	dry    bool
	rz     *halfmark.ImportResolution
	cache  map[string][2]int64
	next   int64 // last placeholder id handed out (negative)
	err    error // a store failure (not a bad row)
}

func (r *resolver) placeholder() int64 { r.next--; return r.next }

func (r *resolver) resolve(machine, beam string) (int64, int64, error) {
	if r.cache == nil {
		r.cache = map[string][2]int64{}
	}
	energy, fff, err := halfmark.ParseBeamLabel(beam)
	if err != nil {
		return 0, 0, err
	}
	label := halfmark.BeamLabel(energy, fff)
	key := machine + "\x00" + label
	if v, ok := r.cache[key]; ok {
		return v[0], v[1], nil
	}
	mkey := machine + "\x00"
	var m halfmark.Machine
	if v, ok := r.cache[mkey]; ok {
		m.ID = v[0]
	} else {
		m, err = r.d.MachineByName(r.ctx, machine)
		if halfmark.ErrorCodeOf(err) == halfmark.ENotFound && r.create {
			m = halfmark.Machine{Name: machine, SADcm: 100, Clinical: true}
			if r.dry {
				m.ID, err = r.placeholder(), nil
			} else {
				err = r.d.CreateMachine(r.ctx, r.actor, &m)
			}
			if err == nil {
				r.rz.Create = append(r.rz.Create, "machine "+machine+" (SAD 100 cm)")
			}
		}
		if err != nil {
			if halfmark.ErrorCodeOf(err) == halfmark.ENotFound {
				return 0, 0, fmt.Errorf("machine %q does not exist; create it first (POST /api/v1/machines) or use --create-missing", machine)
			}
			if halfmark.ErrorCodeOf(err) != halfmark.EInvalid && r.err == nil {
				r.err = err
			}
			return 0, 0, err
		}
		r.cache[mkey] = [2]int64{m.ID, 0}
		r.rz.Machines[m.ID] = machine
	}
	var bs []halfmark.Beam
	if m.ID > 0 {
		if bs, err = r.d.Beams(r.ctx, m.ID); err != nil {
			if r.err == nil {
				r.err = err
			}
			return 0, 0, err
		}
	}
	for _, b := range bs {
		if b.EnergyMV == energy && b.FFF == fff {
			r.cache[key] = [2]int64{m.ID, b.ID}
			r.rz.Beams[b.ID] = label
			return m.ID, b.ID, nil
		}
	}
	if !r.create {
		return 0, 0, fmt.Errorf("machine %q has no %s beam; add it first or use --create-missing", machine, label)
	}
	b := halfmark.Beam{MachineID: m.ID, EnergyMV: energy, FFF: fff}
	if r.dry || m.ID < 0 {
		b.ID = r.placeholder()
	} else if err := r.d.CreateBeam(r.ctx, r.actor, &b); err != nil {
		if r.err == nil && halfmark.ErrorCodeOf(err) != halfmark.EInvalid {
			r.err = err
		}
		return 0, 0, err
	}
	r.rz.Create = append(r.rz.Create, "beam "+machine+" "+label)
	r.cache[key] = [2]int64{m.ID, b.ID}
	r.rz.Beams[b.ID] = label
	return m.ID, b.ID, nil
}
