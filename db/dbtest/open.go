package dbtest

import (
	"context"
	"testing"

	"halfmark/db"
)

// Open gives the test a migrated throw-away database opened as a store;
// it is closed when the test ends.
func Open(t testing.TB) *db.DB {
	t.Helper()
	url := New(t)
	ctx := context.Background()
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatalf("dbtest: migrate: %v", err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatalf("dbtest: open: %v", err)
	}
	t.Cleanup(d.Close)
	return d
}
