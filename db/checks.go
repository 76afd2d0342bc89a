package db

import (
	"context"
	"errors"
	"fmt"
	"strings"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"

	"halfmark"
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

// ValidateChecks runs halfmark.ValidateChecks — the one validation of
// checks, which also sets ids and isocentre positions — with the machines
// and beams of the store. It writes nothing. prefix names the array in field
// errors ("checks"); "" for a single check.
func (d *DB) ValidateChecks(ctx context.Context, cs []halfmark.Check, prefix string) error {
	return halfmark.ValidateChecks(cs, prefix, d.Now(), func(id int64) (halfmark.Machine, []halfmark.Beam, bool, error) {
		m, err := d.Machine(ctx, id)
		if halfmark.ErrorCodeOf(err) == halfmark.ENotFound {
			return m, nil, false, nil
		}
		if err != nil {
			return m, nil, false, err
		}
		bs, err := d.Beams(ctx, id)
		return m, bs, err == nil, err
	})
}

// record stores cs all-or-nothing; replays of stored ids with the same body
// count as existing, with another body as a conflict. after, if not nil,
// runs in the same transaction once the new checks are written.
func (d *DB) record(ctx context.Context, a halfmark.Actor, cs []halfmark.Check, prefix string,
	after func(tx pgx.Tx, isNew map[string]bool) error) (halfmark.BatchResult, error) {
	if err := halfmark.SetMethods(cs, "", prefix); err != nil {
		return halfmark.BatchResult{}, err
	}
	if err := d.ValidateChecks(ctx, cs, prefix); err != nil {
		return halfmark.BatchResult{}, err
	}
	n := len(cs)
	res := halfmark.BatchResult{IDs: make([]string, n)}
	hashes := make([]string, n)
	for i := range cs {
		hashes[i] = cs[i].BodyHash()
		res.IDs[i] = cs[i].ID
	}
	out, err := d.insertChecks(ctx, a, cs, hashes, res, prefix, after)
	if errors.Is(err, errRaced) {
		out, err = d.insertChecks(ctx, a, cs, hashes, res, prefix, after)
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
	prefix string, after func(tx pgx.Tx, isNew map[string]bool) error) (halfmark.BatchResult, error) {
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
		if err := checkCorrectedInStore(ctx, tx, cs, isNew, prefix); err != nil {
			return err
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
		if err := announceChecks(ctx, tx, cs, isNew); err != nil {
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

// announceChecks notifies ChecksChannel once per machine of the new
// checks; PostgreSQL delivers it when the transaction commits, never before.
func announceChecks(ctx context.Context, tx pgx.Tx, cs []halfmark.Check, isNew map[string]bool) error {
	seen := map[int64]bool{}
	var ids []int64
	for i := range cs {
		if isNew[cs[i].ID] && !seen[cs[i].MachineID] {
			seen[cs[i].MachineID] = true
			ids = append(ids, cs[i].MachineID)
		}
	}
	_, err := tx.Exec(ctx, `SELECT pg_notify($1, m::text) FROM unnest($2::bigint[]) m`, ChecksChannel, ids)
	return err
}

// checkCorrectedInStore applies the store's rules of corrections to the
// new checks: the corrected check exists (stored, or new in this batch), is
// of the same machine and beam, and no stored check corrects it yet. The
// rules within one batch are halfmark.ValidateChecks'.
func checkCorrectedInStore(ctx context.Context, tx pgx.Tx, cs []halfmark.Check, isNew map[string]bool, prefix string) error {
	var targets []string
	inBatch := map[string]bool{}
	for i := range cs {
		inBatch[cs[i].ID] = isNew[cs[i].ID]
		if isNew[cs[i].ID] && cs[i].Supersedes != "" {
			targets = append(targets, cs[i].Supersedes)
		}
	}
	if len(targets) == 0 {
		return nil
	}
	type stored struct {
		machine, beam int64
		correctedBy   string
	}
	rows, err := tx.Query(ctx, `SELECT c.id::text, c.machine_id, c.beam_id, coalesce((SELECT x.id::text FROM checks x WHERE x.supersedes = c.id), '')
		FROM checks c WHERE c.id = ANY($1::text[]::uuid[])`, targets)
	if err != nil {
		return err
	}
	found := map[string]stored{}
	var id string
	var st stored
	if _, err := pgx.ForEachRow(rows, []any{&id, &st.machine, &st.beam, &st.correctedBy}, func() error { found[id] = st; return nil }); err != nil {
		return err
	}
	var f halfmark.Fields
	conflict := ""
	for i := range cs {
		c := &cs[i]
		if !isNew[c.ID] || c.Supersedes == "" {
			continue
		}
		field := "supersedes"
		if prefix != "" {
			field = fmt.Sprintf("%s[%d].supersedes", prefix, i)
		}
		t, ok := found[c.Supersedes]
		switch {
		case !ok && !inBatch[c.Supersedes]:
			f.Add(field, "names check %s, which does not exist; a correction names a stored check of the same machine and beam", c.Supersedes)
		case !ok:
			// corrected within the batch: halfmark.ValidateChecks checked it
		case t.machine != c.MachineID || t.beam != c.BeamID:
			f.Add(field, "names a check of machine %d beam %d; a correction must be of the same machine and beam (%d, %d)", t.machine, t.beam, c.MachineID, c.BeamID)
		case t.correctedBy != "":
			conflict = c.Supersedes
		}
	}
	if err := f.Err("the check is not valid; nothing was stored"); err != nil {
		return err
	}
	if conflict != "" {
		return halfmark.Errorf(halfmark.EConflict, "check %s has already been corrected; correct the newest version instead", conflict)
	}
	return nil
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
