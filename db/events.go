package db

import (
	"context"
	"strconv"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// CreateServiceEvent stores a service note on a machine. With NewBaseline
// set, the named edges' series (every series of the machine when Edges is
// empty) get a new baseline version in the same transaction: source
// "service", value and sigma NULL (estimated from the first points after
// At), valid from At — the SQL of SetBaseline.
func (d *DB) CreateServiceEvent(ctx context.Context, a halfmark.Actor, ev *halfmark.ServiceEvent) error {
	if err := ev.Validate(d.Now()); err != nil {
		return err
	}
	if _, err := d.Machine(ctx, ev.MachineID); err != nil {
		return err
	}
	ev.CreatedBy = a.Name
	return d.tx(ctx, func(tx pgx.Tx) error {
		if err := tx.QueryRow(ctx, `INSERT INTO service_events (machine_id, at, note, edges, new_baseline, created_by)
			VALUES ($1,$2,$3,$4,$5,$6) RETURNING id, created_at`,
			ev.MachineID, ev.At, ev.Note, ev.Edges, ev.NewBaseline, a.Name).Scan(&ev.ID, &ev.CreatedAt); err != nil {
			return err
		}
		if err := audit(ctx, tx, a, "create", "service_event", strconv.FormatInt(ev.ID, 10), ev); err != nil {
			return err
		}
		if !ev.NewBaseline {
			return nil
		}
		rows, err := tx.Query(ctx, `SELECT id FROM series WHERE machine_id = $1 AND (cardinality($2::text[]) = 0 OR edge = ANY($2))
			ORDER BY id FOR UPDATE`, ev.MachineID, ev.Edges)
		if err != nil {
			return err
		}
		ids, err := pgx.CollectRows(rows, pgx.RowTo[int64])
		if err != nil {
			return err
		}
		reason := "service event " + strconv.FormatInt(ev.ID, 10) + ": " + ev.Note
		for _, id := range ids {
			b := halfmark.Baseline{SeriesID: id, ValidFrom: ev.At, Source: halfmark.BaselineService, SetBy: a.Name, Reason: reason}
			if err := tx.QueryRow(ctx, `INSERT INTO baselines (series_id, version, value_mm, sigma_mm, valid_from, source, set_by, reason)
				VALUES ($1, (SELECT coalesce(max(version), 0) + 1 FROM baselines WHERE series_id = $1), NULL, NULL, $2, 'service', $3, $4)
				RETURNING id, version, created_at`, id, ev.At, a.Name, reason).Scan(&b.ID, &b.Version, &b.CreatedAt); err != nil {
				return err
			}
			if err := audit(ctx, tx, a, "set-baseline", "series", strconv.FormatInt(id, 10), b); err != nil {
				return err
			}
		}
		return nil
	})
}

// ServiceEvents lists a machine's service events, newest first.
func (d *DB) ServiceEvents(ctx context.Context, machineID int64) ([]halfmark.ServiceEvent, error) {
	if _, err := d.Machine(ctx, machineID); err != nil {
		return nil, err
	}
	rows, err := d.Pool.Query(ctx, `SELECT id, machine_id, at, note, edges, new_baseline, created_by, created_at
		FROM service_events WHERE machine_id = $1 ORDER BY at DESC, id DESC`, machineID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.ServiceEvent, error) {
		var e halfmark.ServiceEvent
		err := r.Scan(&e.ID, &e.MachineID, &e.At, &e.Note, &e.Edges, &e.NewBaseline, &e.CreatedBy, &e.CreatedAt)
		return e, err
	})
	return out, mapErr(err)
}
