package db

import (
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"time"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"

	"halfmark"
	"halfmark/analysis"
)

// MaxBatch is the most checks one batch may carry.
const MaxBatch = 20000

// RecordCheck implements halfmark.CheckService.
func (d *DB) RecordCheck(ctx context.Context, a halfmark.Actor, c *halfmark.Check) (halfmark.StoredCheck, bool, error) {
	res, err := d.record(ctx, a, []halfmark.Check{*c}, "", nil)
	if err != nil {
		return halfmark.StoredCheck{}, false, err
	}
	stored, err := d.Check(ctx, res.IDs[0])
	return stored, res.Created == 1, err
}

// RecordBatch implements halfmark.CheckService.
func (d *DB) RecordBatch(ctx context.Context, a halfmark.Actor, cs []halfmark.Check) (halfmark.BatchResult, error) {
	if len(cs) == 0 {
		return halfmark.BatchResult{}, halfmark.Invalid("the batch is empty", halfmark.FieldError{Field: "checks", Message: "send at least one check"})
	}
	if len(cs) > MaxBatch {
		return halfmark.BatchResult{}, halfmark.Invalid("the batch is too large", halfmark.FieldError{Field: "checks",
			Message: fmt.Sprintf("has %d checks; send at most %d per batch", len(cs), MaxBatch)})
	}
	return d.record(ctx, a, cs, "checks", nil)
}

// Prepare validates checks against the store (machines, beams) and fills
// ids, isocentre positions and body hashes. It writes nothing. prefix names
// the array in field errors ("checks"); "" for a single check.
func (d *DB) Prepare(ctx context.Context, cs []halfmark.Check, prefix string) error {
	now := d.Now()
	var f halfmark.Fields
	machines := map[int64]*halfmark.Machine{}
	beams := map[int64]int64{} // beam id → machine id
	ids := make(map[string]int, len(cs))
	for i := range cs {
		c := &cs[i]
		p := ""
		if prefix != "" {
			p = fmt.Sprintf("%s[%d].", prefix, i)
		}
		f = append(f, c.Validate(p, now)...)
		if c.MachineID > 0 {
			m, ok := machines[c.MachineID]
			if !ok {
				mm, err := d.Machine(ctx, c.MachineID)
				if err != nil && halfmark.ErrorCodeOf(err) != halfmark.ENotFound {
					return err
				}
				if err == nil {
					m = &mm
					bs, err := d.Beams(ctx, mm.ID)
					if err != nil {
						return err
					}
					for _, b := range bs {
						beams[b.ID] = b.MachineID
					}
				}
				machines[c.MachineID] = m
			}
			if m == nil {
				f.Add(p+"machine_id", "machine %d does not exist (see GET /api/v1/machines)", c.MachineID)
			} else {
				if c.BeamID > 0 && beams[c.BeamID] != c.MachineID {
					f.Add(p+"beam_id", "beam %d is not a beam of machine %d (%s); see GET /api/v1/machines/%d/beams", c.BeamID, m.ID, m.Name, m.ID)
				}
				if err := c.Project(m.SADcm, analysis.ProjectToIsocentre); err != nil {
					f.Add(p+"setup", "cannot project to the isocentre plane: %v", err)
				}
			}
		}
		if c.ID == "" {
			c.ID = uuid.NewString()
		}
		c.ID = strings.ToLower(c.ID)
		c.Supersedes = strings.ToLower(c.Supersedes)
		if j, dup := ids[c.ID]; dup {
			f.Add(p+"id", "repeats the id of %s[%d]; each check needs its own id", prefix, j)
		}
		ids[c.ID] = i
	}
	return f.Err("the check is not valid; nothing was stored")
}

// record stores cs all-or-nothing; replays of stored ids with the same body
// count as existing, with another body as a conflict. after, if not nil,
// runs in the same transaction once the new checks are written.
func (d *DB) record(ctx context.Context, a halfmark.Actor, cs []halfmark.Check, prefix string,
	after func(tx pgx.Tx, isNew map[string]bool) error) (halfmark.BatchResult, error) {
	if err := d.Prepare(ctx, cs, prefix); err != nil {
		return halfmark.BatchResult{}, err
	}
	n := len(cs)
	res := halfmark.BatchResult{IDs: make([]string, n)}
	hashes := make([]string, n)
	for i := range cs {
		hashes[i] = cs[i].BodyHash()
	}
	cols := struct {
		id, sup, hash, kind, dev, op, note, geom []string
		ver                                      []string
		mach, beam                               []int64
		at                                       []time.Time
		ssd, depth, fx, fy, col, gan             []*float64
		edges                                    []string
	}{}
	for i := range cs {
		c := &cs[i]
		res.IDs[i] = c.ID
		cols.id = append(cols.id, c.ID)
		var sup string
		if c.Supersedes != "" {
			sup = c.Supersedes
		}
		cols.sup = append(cols.sup, sup)
		cols.hash = append(cols.hash, hashes[i])
		cols.kind = append(cols.kind, string(c.Kind))
		cols.dev = append(cols.dev, c.Device)
		cols.op = append(cols.op, c.Operator)
		cols.note = append(cols.note, c.Note)
		cols.geom = append(cols.geom, c.Setup.Geometry())
		cols.ver = append(cols.ver, c.AnalysisVersion)
		cols.mach = append(cols.mach, c.MachineID)
		cols.beam = append(cols.beam, c.BeamID)
		cols.at = append(cols.at, c.MeasuredAt)
		s := c.Setup
		cols.ssd = append(cols.ssd, s.SSDcm)
		cols.depth = append(cols.depth, s.DepthCm)
		cols.fx = append(cols.fx, s.FieldXcm)
		cols.fy = append(cols.fy, s.FieldYcm)
		cols.col = append(cols.col, s.CollimatorDeg)
		cols.gan = append(cols.gan, s.GantryDeg)
		ej, err := json.Marshal(c.Edges)
		if err != nil {
			return halfmark.BatchResult{}, err
		}
		cols.edges = append(cols.edges, string(ej))
	}
	err := d.tx(ctx, func(tx pgx.Tx) error {
		rows, err := tx.Query(ctx, `INSERT INTO checks (id, supersedes, body_hash, kind, device, operator, note, geometry,
				machine_id, beam_id, measured_at, ssd_cm, depth_cm, field_x_cm, field_y_cm, collimator_deg, gantry_deg, edges, analysis_version, created_by)
			SELECT u.id, NULLIF(u.sup,'')::uuid, u.hash, u.kind, u.dev, u.op, u.note, u.geom, u.mach, u.beam, u.at,
				u.ssd, u.depth, u.fx, u.fy, u.col, u.gan, u.edges::jsonb, u.ver, $20
			FROM unnest($1::uuid[], $2::text[], $3::text[], $4::text[], $5::text[], $6::text[], $7::text[], $8::text[],
				$9::bigint[], $10::bigint[], $11::timestamptz[], $12::float8[], $13::float8[], $14::float8[], $15::float8[],
				$16::float8[], $17::float8[], $18::text[], $19::text[])
				AS u(id, sup, hash, kind, dev, op, note, geom, mach, beam, at, ssd, depth, fx, fy, col, gan, edges, ver)
			ON CONFLICT (id) DO NOTHING RETURNING id::text`,
			cols.id, cols.sup, cols.hash, cols.kind, cols.dev, cols.op, cols.note, cols.geom, cols.mach, cols.beam, cols.at,
			cols.ssd, cols.depth, cols.fx, cols.fy, cols.col, cols.gan, cols.edges, cols.ver, a.Name)
		if err != nil {
			return supersedeErr(err)
		}
		created, err := pgx.CollectRows(rows, pgx.RowTo[string])
		if err != nil {
			return supersedeErr(err)
		}
		isNew := make(map[string]bool, len(created))
		for _, id := range created {
			isNew[id] = true
		}
		res.Created = len(created)
		res.Existing = n - len(created)
		if res.Existing > 0 {
			if err := checkReplays(ctx, tx, cs, hashes, isNew); err != nil {
				return err
			}
		}
		if res.Created == 0 {
			return nil
		}
		if err := upsertSeries(ctx, tx, cs, isNew); err != nil {
			return err
		}
		if err := auditChecks(ctx, tx, a, cs, isNew); err != nil {
			return err
		}
		if after != nil {
			return after(tx, isNew)
		}
		return nil
	})
	if err != nil {
		return halfmark.BatchResult{}, err
	}
	return res, nil
}

// checkReplays compares the body hash of every already-stored id.
func checkReplays(ctx context.Context, tx pgx.Tx, cs []halfmark.Check, hashes []string, isNew map[string]bool) error {
	var ids, hs []string
	for i := range cs {
		if !isNew[cs[i].ID] {
			ids = append(ids, cs[i].ID)
			hs = append(hs, hashes[i])
		}
	}
	rows, err := tx.Query(ctx, `SELECT u.id::text FROM unnest($1::uuid[], $2::text[]) AS u(id, hash)
		JOIN checks c ON c.id = u.id WHERE c.body_hash <> u.hash`, ids, hs)
	if err != nil {
		return err
	}
	bad, err := pgx.CollectRows(rows, pgx.RowTo[string])
	if err != nil {
		return err
	}
	if len(bad) > 0 {
		if len(bad) > 5 {
			bad = append(bad[:5], "…")
		}
		return halfmark.Errorf(halfmark.EConflict,
			"check id %s is already stored with different content; to correct a stored check send a new check with \"supersedes\" set to its id",
			strings.Join(bad, ", "))
	}
	return nil
}

func supersedeErr(err error) error {
	e := mapErr(err)
	switch halfmark.ErrorCodeOf(e) {
	case halfmark.EConflict:
		return halfmark.Errorf(halfmark.EConflict, "the check named in \"supersedes\" has already been corrected; correct the newest version instead")
	case halfmark.EInvalid:
		return halfmark.Invalid("the check is not valid; nothing was stored",
			halfmark.FieldError{Field: "supersedes", Message: "names a check that does not exist"})
	}
	return e
}

// upsertSeries creates the series the new checks add points to.
func upsertSeries(ctx context.Context, tx pgx.Tx, cs []halfmark.Check, isNew map[string]bool) error {
	type key struct {
		m, b    int64
		g, e, q string
	}
	seen := map[key]bool{}
	var ms, bs []int64
	var gs, es, qs []string
	add := func(k key) {
		if !seen[k] {
			seen[k] = true
			ms, bs, gs, es, qs = append(ms, k.m), append(bs, k.b), append(gs, k.g), append(es, k.e), append(qs, k.q)
		}
	}
	for i := range cs {
		c := &cs[i]
		if !isNew[c.ID] {
			continue
		}
		g := c.Setup.Geometry()
		for _, e := range c.Edges {
			add(key{c.MachineID, c.BeamID, g, e.Edge, string(halfmark.QPosition)})
			if e.PenumbraMM != nil {
				add(key{c.MachineID, c.BeamID, g, e.Edge, string(halfmark.QPenumbra)})
			}
			if e.LightPositionMM != nil {
				add(key{c.MachineID, c.BeamID, g, e.Edge, string(halfmark.QLightOffset)})
			}
		}
	}
	_, err := tx.Exec(ctx, `INSERT INTO series (machine_id, beam_id, geometry, edge, quantity)
		SELECT * FROM unnest($1::bigint[], $2::bigint[], $3::text[], $4::text[], $5::text[])
		ORDER BY 1, 2, 3, 4, 5 ON CONFLICT DO NOTHING`, ms, bs, gs, es, qs)
	return err
}

// auditChecks writes the audit trail of newly stored checks: one row per
// check, or for a batch of more than batchAuditMin checks one row that lists
// every id (entity "check-batch"; db.Audit finds a check's batch row too).
func auditChecks(ctx context.Context, tx pgx.Tx, a halfmark.Actor, cs []halfmark.Check, isNew map[string]bool) error {
	var ids, corrected []string
	for i := range cs {
		if isNew[cs[i].ID] {
			ids = append(ids, cs[i].ID)
			if cs[i].Supersedes != "" {
				corrected = append(corrected, cs[i].Supersedes)
			}
		}
	}
	if len(ids) > batchAuditMin {
		return audit(ctx, tx, a, "record-batch", "check-batch", ids[0], map[string]any{
			"ids": ids, "count": len(ids), "supersedes": corrected})
	}
	for i := range cs {
		c := &cs[i]
		if !isNew[c.ID] {
			continue
		}
		action := "record"
		if c.Supersedes != "" {
			action = "correct"
		}
		if err := audit(ctx, tx, a, action, "check", c.ID, map[string]any{"machine_id": c.MachineID, "beam_id": c.BeamID,
			"kind": c.Kind, "edges": len(c.Edges), "supersedes": c.Supersedes}); err != nil {
			return err
		}
	}
	return nil
}

// batchAuditMin is the batch size above which one audit row covers a batch.
const batchAuditMin = 20
