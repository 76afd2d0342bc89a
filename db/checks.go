package db

import (
	"context"
	"errors"
	"fmt"
	"strings"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

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
	if err := halfmark.SetMethods(cs, "", prefix); err != nil {
		return halfmark.BatchResult{}, err
	}
	if err := d.Prepare(ctx, cs, prefix); err != nil {
		return halfmark.BatchResult{}, err
	}
	n := len(cs)
	res := halfmark.BatchResult{IDs: make([]string, n)}
	hashes := make([]string, n)
	for i := range cs {
		hashes[i] = cs[i].BodyHash()
		res.IDs[i] = cs[i].ID
	}
	out, err := d.insertChecks(ctx, a, cs, hashes, res, after)
	if errors.Is(err, errRaced) {
		out, err = d.insertChecks(ctx, a, cs, hashes, res, after)
	}
	if errors.Is(err, errRaced) {
		err = &halfmark.Error{Code: halfmark.EUnavailable, Message: "another request is storing the same check; retry", Err: err}
	}
	return out, err
}

// errRaced says another transaction stored one of the same check ids first.
var errRaced = errors.New("a concurrent request stored the same check id")

// insertChecks writes the checks not yet stored with COPY, after reading
// which ids exist: a stored id with the same body hash is a replay, with
// another a conflict. If a concurrent request stores one of the ids
// between the read and the COPY, the unique key refuses it and the caller
// tries once more (errRaced).
func (d *DB) insertChecks(ctx context.Context, a halfmark.Actor, cs []halfmark.Check, hashes []string, res halfmark.BatchResult,
	after func(tx pgx.Tx, isNew map[string]bool) error) (halfmark.BatchResult, error) {
	n := len(cs)
	err := d.tx(ctx, func(tx pgx.Tx) error {
		stored, err := storedHashes(ctx, tx, res.IDs)
		if err != nil {
			return err
		}
		isNew := make(map[string]bool, n)
		var conflicts []string
		for i := range cs {
			h, ok := stored[cs[i].ID]
			switch {
			case !ok:
				isNew[cs[i].ID] = true
			case h != hashes[i]:
				conflicts = append(conflicts, cs[i].ID)
			}
		}
		if len(conflicts) > 0 {
			return conflictErr(conflicts)
		}
		res.Created = len(isNew)
		res.Existing = n - res.Created
		if res.Created == 0 {
			return nil
		}
		if _, err := tx.CopyFrom(ctx, pgx.Identifier{"checks"}, checkColumns, &checkRows{cs: cs, hashes: hashes, isNew: isNew, by: a.Name}); err != nil {
			return copyErr(err)
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

// storedHashes returns the body hash of each id already stored.
func storedHashes(ctx context.Context, tx pgx.Tx, ids []string) (map[string]string, error) {
	rows, err := tx.Query(ctx, `SELECT id::text, body_hash FROM checks WHERE id = ANY($1::text[]::uuid[])`, ids)
	if err != nil {
		return nil, err
	}
	out := map[string]string{}
	var id, h string
	_, err = pgx.ForEachRow(rows, []any{&id, &h}, func() error { out[id] = h; return nil })
	return out, err
}

func conflictErr(ids []string) error {
	if len(ids) > 5 {
		ids = append(ids[:5], "…")
	}
	return halfmark.Errorf(halfmark.EConflict,
		"check id %s is already stored with different content; to correct a stored check send a new check with \"supersedes\" set to its id",
		strings.Join(ids, ", "))
}

// copyErr explains a refused COPY: a raced id, a check corrected twice, or
// a correction of a check that does not exist.
func copyErr(err error) error {
	var pe *pgconn.PgError
	if errors.As(err, &pe) && pe.Code == "23505" && pe.ConstraintName == "checks_pkey" {
		return errRaced
	}
	return supersedeErr(err)
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
		m, b       int64
		g, e, q, t string
	}
	seen := map[key]bool{}
	var ms, bs []int64
	var gs, es, qs, ts []string
	add := func(k key) {
		if !seen[k] {
			seen[k] = true
			ms, bs, gs, es, qs, ts = append(ms, k.m), append(bs, k.b), append(gs, k.g), append(es, k.e), append(qs, k.q), append(ts, k.t)
		}
	}
	for i := range cs {
		c := &cs[i]
		if !isNew[c.ID] {
			continue
		}
		g, t := c.Setup.Geometry(), string(c.Method)
		for _, e := range c.Edges {
			add(key{c.MachineID, c.BeamID, g, e.Edge, string(halfmark.QPosition), t})
			if e.PenumbraMM != nil {
				add(key{c.MachineID, c.BeamID, g, e.Edge, string(halfmark.QPenumbra), t})
			}
			if e.LightPositionMM != nil {
				add(key{c.MachineID, c.BeamID, g, e.Edge, string(halfmark.QLightOffset), t})
			}
		}
	}
	_, err := tx.Exec(ctx, `INSERT INTO series (machine_id, beam_id, geometry, edge, quantity, method)
		SELECT * FROM unnest($1::bigint[], $2::bigint[], $3::text[], $4::text[], $5::text[], $6::text[])
		ORDER BY 1, 2, 3, 4, 5, 6 ON CONFLICT DO NOTHING`, ms, bs, gs, es, qs, ts)
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
		detail := map[string]any{"machine_id": c.MachineID, "beam_id": c.BeamID,
			"kind": c.Kind, "edges": len(c.Edges), "supersedes": c.Supersedes}
		if c.Supersedes != "" {
			detail["note"] = c.Note // a correction's reason
		}
		if err := audit(ctx, tx, a, action, "check", c.ID, detail); err != nil {
			return err
		}
	}
	return nil
}

// batchAuditMin is the batch size above which one audit row covers a batch.
const batchAuditMin = 20
