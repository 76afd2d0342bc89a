package db

import (
	"context"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// CheckVerdicts implements halfmark.VerdictService: the series_state row of
// each series the check is a current point of. A series counts as
// evaluated for the check once its last evaluation saw checks stored at or
// after the check's created_at.
func (d *DB) CheckVerdicts(ctx context.Context, checkID string) ([]halfmark.EdgeVerdict, error) {
	if _, err := d.Check(ctx, checkID); err != nil {
		return nil, err
	}
	rows, err := d.Pool.Query(ctx, `SELECT s.id, s.edge, s.quantity,
			coalesce(st.last_created_at >= p.created_at, false), coalesce(st.level, 0), coalesce(st.rule, ''), st.evaluated_at
		FROM series_points p
		JOIN series s ON s.id = p.series_id
		LEFT JOIN series_state st ON st.series_id = s.id
		WHERE p.check_id = $1
		ORDER BY s.quantity DESC, s.edge`, checkID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.EdgeVerdict, error) {
		var v halfmark.EdgeVerdict
		var q string
		var lvl int
		err := r.Scan(&v.SeriesID, &v.Edge, &q, &v.Evaluated, &lvl, &v.Rule, &v.EvaluatedAt)
		v.Quantity, v.Level = halfmark.Quantity(q), halfmark.Level(lvl)
		if !v.Evaluated {
			v.Level, v.Rule = halfmark.LevelInControl, ""
		}
		return v, err
	})
	return out, mapErr(err)
}
