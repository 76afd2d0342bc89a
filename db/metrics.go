package db

import "context"

// OpenAlertsByLevel counts unresolved alerts by level (for /metrics).
func (d *DB) OpenAlertsByLevel(ctx context.Context) (map[int]int, error) {
	rows, err := d.Pool.Query(ctx, `SELECT level, count(*) FROM alerts WHERE state <> 'resolved' GROUP BY level`)
	if err != nil {
		return nil, mapErr(err)
	}
	defer rows.Close()
	out := map[int]int{}
	for rows.Next() {
		var l, n int
		if err := rows.Scan(&l, &n); err != nil {
			return nil, mapErr(err)
		}
		out[l] = n
	}
	return out, mapErr(rows.Err())
}

// OutboxBacklog counts notifications not yet delivered (for /metrics).
func (d *DB) OutboxBacklog(ctx context.Context) (int, error) {
	var n int
	err := d.Pool.QueryRow(ctx, `SELECT count(*) FROM outbox WHERE delivered_at IS NULL`).Scan(&n)
	return n, mapErr(err)
}
