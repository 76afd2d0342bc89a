package db

import (
	"context"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

func nullTime(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	return &t
}

const baselineCols = `id, series_id, version, value_mm, sigma_mm, valid_from, source, set_by, reason, created_at`

func scanBaseline(r pgx.Row) (halfmark.Baseline, error) {
	var b halfmark.Baseline
	var src string
	err := r.Scan(&b.ID, &b.SeriesID, &b.Version, &b.ValueMM, &b.SigmaMM, &b.ValidFrom, &src, &b.SetBy, &b.Reason, &b.CreatedAt)
	b.Source = halfmark.BaselineSource(src)
	return b, err
}

const seriesSQL = `SELECT s.id, s.machine_id, s.beam_id, s.geometry, s.edge, s.quantity, s.method,
		(SELECT count(*) FROM series_points p WHERE p.series_id = s.id),
		(SELECT max(p.measured_at) FROM series_points p WHERE p.series_id = s.id)
	FROM series s`

func scanSeries(r pgx.Row) (halfmark.Series, error) {
	var s halfmark.Series
	var q, m string
	err := r.Scan(&s.ID, &s.MachineID, &s.BeamID, &s.Geometry, &s.Edge, &q, &m, &s.Points, &s.LastAt)
	s.Quantity, s.Method = halfmark.Quantity(q), halfmark.Method(m)
	return s, err
}

// MachineSeries implements halfmark.SeriesService.
func (d *DB) MachineSeries(ctx context.Context, machineID int64) ([]halfmark.Series, error) {
	if _, err := d.Machine(ctx, machineID); err != nil {
		return nil, err
	}
	rows, err := d.Pool.Query(ctx, seriesSQL+` WHERE s.machine_id = $1 ORDER BY s.beam_id, s.geometry, s.method, s.edge, s.quantity`, machineID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Series, error) { return scanSeries(r) })
	if err != nil {
		return nil, mapErr(err)
	}
	current, err := d.currentBaselines(ctx, machineID)
	if err != nil {
		return nil, err
	}
	for i := range out {
		if b, ok := current[out[i].ID]; ok {
			out[i].Baseline = &b
		}
	}
	return out, nil
}

// currentBaselines returns the baseline in force now for each series of a
// machine.
func (d *DB) currentBaselines(ctx context.Context, machineID int64) (map[int64]halfmark.Baseline, error) {
	rows, err := d.Pool.Query(ctx, `SELECT DISTINCT ON (b.series_id) b.id, b.series_id, b.version, b.value_mm, b.sigma_mm,
			b.valid_from, b.source, b.set_by, b.reason, b.created_at
		FROM baselines b JOIN series s ON s.id = b.series_id
		WHERE s.machine_id = $1 AND b.valid_from <= now()
		ORDER BY b.series_id, b.valid_from DESC, b.version DESC`, machineID)
	if err != nil {
		return nil, mapErr(err)
	}
	list, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Baseline, error) { return scanBaseline(r) })
	if err != nil {
		return nil, mapErr(err)
	}
	m := make(map[int64]halfmark.Baseline, len(list))
	for _, b := range list {
		m[b.SeriesID] = b
	}
	return m, nil
}

// Series implements halfmark.SeriesService.
func (d *DB) Series(ctx context.Context, id int64) (halfmark.Series, error) {
	s, err := scanSeries(d.Pool.QueryRow(ctx, seriesSQL+` WHERE s.id = $1`, id))
	if err == pgx.ErrNoRows {
		return s, halfmark.Errorf(halfmark.ENotFound, "series %d does not exist", id)
	}
	if err != nil {
		return s, mapErr(err)
	}
	b, err := scanBaseline(d.Pool.QueryRow(ctx, `SELECT `+baselineCols+` FROM baselines WHERE series_id = $1 AND valid_from <= now()
		ORDER BY valid_from DESC, version DESC LIMIT 1`, id))
	if err == nil {
		s.Baseline = &b
	} else if err != pgx.ErrNoRows {
		return s, mapErr(err)
	}
	return s, nil
}

// Points implements halfmark.SeriesService.
func (d *DB) Points(ctx context.Context, seriesID int64) ([]halfmark.Point, error) {
	if _, err := d.Series(ctx, seriesID); err != nil {
		return nil, err
	}
	rows, err := d.Pool.Query(ctx, `SELECT check_id::text, measured_at, value, kind, device, operator FROM series_points
		WHERE series_id = $1 ORDER BY measured_at, created_at`, seriesID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Point, error) {
		var p halfmark.Point
		var kind string
		err := r.Scan(&p.CheckID, &p.MeasuredAt, &p.Value, &kind, &p.Device, &p.Operator)
		p.Kind = halfmark.CheckKind(kind)
		return p, err
	})
	return out, mapErr(err)
}

// SetBaseline implements halfmark.SeriesService. The version number is the
// next free one for the series; concurrent setters are serialised by a
// row lock on the series.
func (d *DB) SetBaseline(ctx context.Context, a halfmark.Actor, b *halfmark.Baseline) error {
	if b.Source == "" {
		b.Source = halfmark.BaselineSet
	}
	if err := b.Validate(); err != nil {
		return err
	}
	b.SetBy = a.Name
	return d.tx(ctx, func(tx pgx.Tx) error {
		var one int
		if err := tx.QueryRow(ctx, `SELECT 1 FROM series WHERE id = $1 FOR UPDATE`, b.SeriesID).Scan(&one); err != nil {
			if err == pgx.ErrNoRows {
				return halfmark.Errorf(halfmark.ENotFound, "series %d does not exist", b.SeriesID)
			}
			return err
		}
		err := tx.QueryRow(ctx, `INSERT INTO baselines (series_id, version, value_mm, sigma_mm, valid_from, source, set_by, reason)
			VALUES ($1, (SELECT coalesce(max(version), 0) + 1 FROM baselines WHERE series_id = $1), $2, $3, $4, $5, $6, $7)
			RETURNING id, version, created_at`,
			b.SeriesID, b.ValueMM, b.SigmaMM, b.ValidFrom, string(b.Source), b.SetBy, b.Reason).Scan(&b.ID, &b.Version, &b.CreatedAt)
		if err != nil {
			return err
		}
		return audit(ctx, tx, a, "set-baseline", "series", strconv.FormatInt(b.SeriesID, 10), b)
	})
}

// Baselines implements halfmark.SeriesService.
func (d *DB) Baselines(ctx context.Context, seriesID int64) ([]halfmark.Baseline, error) {
	rows, err := d.Pool.Query(ctx, `SELECT `+baselineCols+` FROM baselines WHERE series_id = $1 ORDER BY valid_from, version`, seriesID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Baseline, error) { return scanBaseline(r) })
	return out, mapErr(err)
}
