package worker

import (
	"context"
	"io"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

var day0 = time.Date(2026, 3, 2, 7, 30, 0, 0, time.UTC) // a Monday

// clock is a settable test clock shared by the store and the worker.
type clock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *clock) Now() time.Time  { c.mu.Lock(); defer c.mu.Unlock(); return c.t }
func (c *clock) Set(t time.Time) { c.mu.Lock(); c.t = t; c.mu.Unlock() }

type fixture struct {
	t       *testing.T
	ctx     context.Context
	db      *db.DB
	clock   *clock
	machine halfmark.Machine
	beam    halfmark.Beam
	rng     *rand.Rand
}

func newFixture(t *testing.T) *fixture {
	t.Helper()
	ctx := context.Background()
	url := dbtest.New(t)
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatal(err)
	}
	d, err := db.Open(ctx, url)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(d.Close)
	c := &clock{t: day0}
	d.Now = c.Now
	f := &fixture{t: t, ctx: ctx, db: d, clock: c, rng: rand.New(rand.NewPCG(3, 5))}
	f.machine = halfmark.Machine{Name: "Linac A", SADcm: 100, Clinical: true}
	if err := d.CreateMachine(ctx, halfmark.CLIActor("test"), &f.machine); err != nil {
		t.Fatal(err)
	}
	f.beam = halfmark.Beam{MachineID: f.machine.ID, EnergyMV: 6}
	if err := d.CreateBeam(ctx, halfmark.CLIActor("test"), &f.beam); err != nil {
		t.Fatal(err)
	}
	return f
}

func fptr(v float64) *float64 { return &v }

// check records one morning check of a 10×10 cm field at the isocentre on
// day k with X1 and X2 at 50 mm plus the given offsets and N(0, 0.1 mm)
// noise.
func (f *fixture) check(k int, dx1, dx2 float64) {
	f.t.Helper()
	at := day0.AddDate(0, 0, k)
	f.clock.Set(at.Add(time.Minute))
	c := halfmark.Check{MachineID: f.machine.ID, BeamID: f.beam.ID, Kind: halfmark.KindMorning, MeasuredAt: at,
		Setup: halfmark.Setup{FieldXcm: fptr(10), FieldYcm: fptr(10)},
		Edges: []halfmark.EdgeResult{
			{Edge: "X1", PositionMM: 50 + dx1 + 0.1*f.rng.NormFloat64()},
			{Edge: "X2", PositionMM: 50 + dx2 + 0.1*f.rng.NormFloat64()},
		}}
	if _, _, err := f.db.RecordCheck(f.ctx, halfmark.CLIActor("test"), &c); err != nil {
		f.t.Fatalf("record check of day %d: %v", k, err)
	}
}

// worker returns a worker on the fixture's store with the given tolerance
// file content ("" : the shipped example).
func (f *fixture) worker(id, book string, n halfmark.FindingNotifier) *Worker {
	f.t.Helper()
	cfg := Config{WorkerID: id, Now: f.clock.Now, Location: time.UTC, Notifier: n}
	if book != "" {
		p := filepath.Join(f.t.TempDir(), "tolerances.toml")
		if err := os.WriteFile(p, []byte(book), 0o644); err != nil {
			f.t.Fatal(err)
		}
		cfg.TolerancesPath = p
	}
	w, err := New(f.db, cfg, slog.New(slog.NewTextHandler(io.Discard, nil)))
	if err != nil {
		f.t.Fatal(err)
	}
	return w
}

func (f *fixture) seriesID(edge string) int64 {
	f.t.Helper()
	var id int64
	if err := f.db.Pool.QueryRow(f.ctx, `SELECT id FROM series WHERE edge = $1 AND quantity = 'position'`, edge).Scan(&id); err != nil {
		f.t.Fatalf("series %s: %v", edge, err)
	}
	return id
}

func (f *fixture) alerts(seriesID int64, states ...halfmark.AlertState) []halfmark.Alert {
	f.t.Helper()
	al, err := f.db.Alerts(f.ctx, halfmark.AlertFilter{SeriesID: seriesID, States: states})
	if err != nil {
		f.t.Fatal(err)
	}
	return al
}

func (f *fixture) count(sql string, args ...any) int {
	f.t.Helper()
	var n int
	if err := f.db.Pool.QueryRow(f.ctx, sql, args...).Scan(&n); err != nil {
		f.t.Fatalf("%s: %v", sql, err)
	}
	return n
}

const customBook = `# local test book: action limit 2.5 mm is a local choice
[[limit]]
quantity = "position"
kind = "default"
tolerance_mm = 2.0
action_mm = 2.5
source = "local choice (test)"
`
