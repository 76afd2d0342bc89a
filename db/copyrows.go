package db

import (
	"context"

	"github.com/jackc/pgx/v5"
)

// CopyRows writes rows into table with a bare COPY, nothing else: the
// baseline the ingest benchmark measures the API path against (the same
// data, no validation, indexes, series or audit). The table must exist.
func (d *DB) CopyRows(ctx context.Context, table string, columns []string, rows [][]any) (int64, error) {
	n, err := d.Pool.CopyFrom(ctx, pgx.Identifier{table}, columns, pgx.CopyFromRows(rows))
	return n, mapErr(err)
}
