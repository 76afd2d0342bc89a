package db

import (
	"context"
	"strconv"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// RecordCheckWithRaw stores a check whose edges were computed from raw data
// together with that raw data, in one transaction: both or neither. A
// replay of the same check id with the same body stores nothing more.
func (d *DB) RecordCheckWithRaw(ctx context.Context, a halfmark.Actor, c *halfmark.Check, r *halfmark.RawData) (halfmark.StoredCheck, bool, error) {
	if err := validateRaw(r, false); err != nil {
		return halfmark.StoredCheck{}, false, err
	}
	if c.Method == "" {
		c.Method = halfmark.InferMethod(c.Device, r.Kind)
	}
	res, err := d.record(ctx, a, []halfmark.Check{*c}, "", func(tx pgx.Tx, isNew map[string]bool) error {
		for id := range isNew {
			r.CheckID = id
			return insertRaw(ctx, tx, a, r)
		}
		return nil
	})
	if err != nil {
		return halfmark.StoredCheck{}, false, err
	}
	stored, err := d.Check(ctx, res.IDs[0])
	return stored, res.Created == 1, err
}

// insertRaw writes one raw record and its audit row inside tx.
func insertRaw(ctx context.Context, tx pgx.Tx, a halfmark.Actor, r *halfmark.RawData) error {
	var opts, an any
	if len(r.Options) > 0 {
		opts = []byte(r.Options)
	}
	if len(r.Analysis) > 0 {
		an = []byte(r.Analysis)
	}
	err := tx.QueryRow(ctx, `INSERT INTO raw_data (check_id, kind, filename, content, options, analysis, analysis_version, created_by)
		VALUES ($1,$2,$3,$4,$5::jsonb,$6::jsonb,$7,$8) RETURNING id, created_at`,
		r.CheckID, string(r.Kind), r.Filename, r.Content, opts, an, r.AnalysisVersion, a.Name).Scan(&r.ID, &r.CreatedAt)
	if err != nil {
		return err
	}
	r.CreatedBy = a.Name
	return audit(ctx, tx, a, "attach", "raw_data", strconv.FormatInt(r.ID, 10),
		map[string]any{"check_id": r.CheckID, "kind": r.Kind, "filename": r.Filename, "bytes": len(r.Content)})
}
