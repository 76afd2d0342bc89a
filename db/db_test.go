package db_test

import (
	"context"
	"sync"
	"testing"

	"halfmark/db"
	"halfmark/db/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// Four processes' worth of migrators start at once on an empty database:
// the goose session lock serialises them, all succeed, and each migration
// is applied exactly once.
func TestConcurrentMigrate(t *testing.T) {
	url := dbtest.New(t)
	ctx := context.Background()
	var wg sync.WaitGroup
	errs := make([]error, 4)
	for i := range errs {
		wg.Add(1)
		go func(i int) {
			defer wg.Done()
			errs[i] = db.Migrate(ctx, url, nil)
		}(i)
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Fatalf("migrator %d: %v", i, err)
		}
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	defer d.Close()
	var applied, distinct int
	if err := d.Pool.QueryRow(ctx, `SELECT count(*), count(DISTINCT version_id) FROM goose_db_version WHERE version_id > 0`).Scan(&applied, &distinct); err != nil {
		t.Fatal(err)
	}
	if applied == 0 || applied != distinct {
		t.Fatalf("%d migration rows for %d versions: a migration ran twice or none ran", applied, distinct)
	}
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatalf("re-running migrations on an up-to-date database: %v", err)
	}
}
