package db

import (
	"context"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// Audit implements halfmark.AuditService. Asking for one check also finds
// the row of the batch that stored it.
func (d *DB) Audit(ctx context.Context, entity, entityID string, limit int) ([]halfmark.AuditEntry, error) {
	if limit <= 0 || limit > 10000 {
		limit = 200
	}
	rows, err := d.Pool.Query(ctx, `SELECT id, at, actor, action, entity, entity_id, detail FROM audit_log
		WHERE ($1 = '' OR entity = $1) AND ($2 = '' OR entity_id = $2)
		   OR ($1 = 'check' AND $2 <> '' AND entity = 'check-batch' AND detail->'ids' ? $2)
		ORDER BY id DESC LIMIT $3`, entity, entityID, limit)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.AuditEntry, error) {
		var e halfmark.AuditEntry
		err := r.Scan(&e.ID, &e.At, &e.Actor, &e.Action, &e.Entity, &e.EntityID, &e.Detail)
		return e, err
	})
	return out, mapErr(err)
}
