package db

import (
	"context"
	"fmt"
	"strconv"
	"strings"

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
		var ckind, cname *string
		if c := ev.Component; c != nil {
			k := string(c.Kind)
			ckind, cname = &k, &c.Name
		}
		if err := tx.QueryRow(ctx, `INSERT INTO service_events (machine_id, at, note, edges, new_baseline, created_by, component_kind, component)
			VALUES ($1,$2,$3,$4,$5,$6,$7,$8) RETURNING id, created_at`,
			ev.MachineID, ev.At, ev.Note, ev.Edges, ev.NewBaseline, a.Name, ckind, cname).Scan(&ev.ID, &ev.CreatedAt); err != nil {
			return err
		}
		if err := audit(ctx, tx, a, "create", "service_event", strconv.FormatInt(ev.ID, 10), ev); err != nil {
			return err
		}
		if !ev.NewBaseline {
			return nil
		}
		ids, err := serviceSeries(ctx, tx, ev)
		if err != nil {
			return err
		}
		if ev.Component != nil && len(ids) == 0 {
			return halfmark.Invalid("the service event is not valid", halfmark.FieldError{Field: "component.component",
				Message: fmt.Sprintf("machine %d has no series of %s; name a jaw (X1, X2, Y1, Y2), a bank (bank 1, bank 2), a leaf (B2P29) or a beam label (6 MV FFF)", ev.MachineID, ev.Component)})
		}
		reason := "service event " + strconv.FormatInt(ev.ID, 10) + ": " + ev.Note
		for _, id := range ids {
			b := halfmark.Baseline{SeriesID: id, ValidFrom: ev.At, Source: halfmark.BaselineService, SetBy: a.Name, Reason: reason}
			// A component's new period starts from the post-service
			// measurements: the mean of the values at or after the event
			// stored so far (record the service once they are in; the more,
			// the smaller the centre's error, σ/√n), with the σ of the
			// previous baseline (or the engine's estimate). Without such
			// values both are estimated from the period's first points.
			fromFirst := ev.Component != nil
			if err := tx.QueryRow(ctx, `INSERT INTO baselines (series_id, version, value_mm, sigma_mm, valid_from, source, set_by, reason)
				VALUES ($1, (SELECT coalesce(max(version), 0) + 1 FROM baselines WHERE series_id = $1),
					CASE WHEN $5 THEN (SELECT avg(p.value) FROM series_points p WHERE p.series_id = $1 AND p.measured_at >= $2) END,
					CASE WHEN $5 THEN coalesce((SELECT x.sigma_mm FROM baselines x WHERE x.series_id = $1 ORDER BY x.valid_from DESC, x.version DESC LIMIT 1),
						(SELECT nullif((st.evaluation->'chart'->>'sigma_mm')::float8, 0) FROM series_state st WHERE st.series_id = $1)) END,
					$2, 'service', $3, $4)
				RETURNING id, version, value_mm, sigma_mm, created_at`, id, ev.At, a.Name, reason, fromFirst).Scan(&b.ID, &b.Version, &b.ValueMM, &b.SigmaMM, &b.CreatedAt); err != nil {
				return err
			}
			if err := audit(ctx, tx, a, "set-baseline", "series", strconv.FormatInt(id, 10), b); err != nil {
				return err
			}
		}
		return nil
	})
}

// serviceSeries locks and lists the series a service event starts a new
// period for: those of its component, or of its edges (every series of the
// machine when it names none).
func serviceSeries(ctx context.Context, tx pgx.Tx, ev *halfmark.ServiceEvent) ([]int64, error) {
	q, args := `SELECT id FROM series WHERE machine_id = $1 AND (cardinality($2::text[]) = 0 OR edge = ANY($2)) ORDER BY id FOR UPDATE`,
		[]any{ev.MachineID, ev.Edges}
	if c := ev.Component; c != nil {
		switch c.Kind {
		case halfmark.ComponentJaw, halfmark.ComponentMLCLeaf:
			q, args = `SELECT id FROM series WHERE machine_id = $1 AND quantity = 'position' AND edge = $2 ORDER BY id FOR UPDATE`,
				[]any{ev.MachineID, normEdge(c.Name)}
		case halfmark.ComponentLightField:
			q, args = `SELECT id FROM series WHERE machine_id = $1 AND quantity = 'light_offset' AND edge = $2 ORDER BY id FOR UPDATE`,
				[]any{ev.MachineID, normEdge(c.Name)}
		case halfmark.ComponentMLCBank:
			bank := strings.TrimSpace(strings.TrimPrefix(strings.ToLower(c.Name), "bank"))
			q, args = `SELECT id FROM series WHERE machine_id = $1 AND quantity = 'position' AND edge LIKE $2 ORDER BY id FOR UPDATE`,
				[]any{ev.MachineID, "B" + bank + "P%"}
		case halfmark.ComponentPenumbra:
			rows, err := tx.Query(ctx, `SELECT id, energy_mv, fff FROM beams WHERE machine_id = $1`, ev.MachineID)
			if err != nil {
				return nil, err
			}
			var beam int64
			var id int64
			var mv float64
			var fff bool
			if _, err := pgx.ForEachRow(rows, []any{&id, &mv, &fff}, func() error {
				if halfmark.BeamLabel(mv, fff) == strings.TrimSpace(c.Name) {
					beam = id
				}
				return nil
			}); err != nil {
				return nil, err
			}
			q, args = `SELECT id FROM series WHERE machine_id = $1 AND quantity = 'penumbra' AND beam_id = $2 ORDER BY id FOR UPDATE`,
				[]any{ev.MachineID, beam}
		}
	}
	rows, err := tx.Query(ctx, q, args...)
	if err != nil {
		return nil, err
	}
	return pgx.CollectRows(rows, pgx.RowTo[int64])
}

func normEdge(s string) string {
	if e, err := halfmark.ParseEdge(s); err == nil {
		return e.String()
	}
	return s
}

// ServiceEvents lists a machine's service events, newest first.
func (d *DB) ServiceEvents(ctx context.Context, machineID int64) ([]halfmark.ServiceEvent, error) {
	if _, err := d.Machine(ctx, machineID); err != nil {
		return nil, err
	}
	rows, err := d.Pool.Query(ctx, `SELECT id, machine_id, at, note, edges, new_baseline, created_by, created_at, component_kind, component
		FROM service_events WHERE machine_id = $1 ORDER BY at DESC, id DESC`, machineID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.ServiceEvent, error) {
		var e halfmark.ServiceEvent
		var kind, name *string
		err := r.Scan(&e.ID, &e.MachineID, &e.At, &e.Note, &e.Edges, &e.NewBaseline, &e.CreatedBy, &e.CreatedAt, &kind, &name)
		if kind != nil && name != nil {
			e.Component = &halfmark.Component{Kind: halfmark.ComponentKind(*kind), Name: *name}
		}
		return e, err
	})
	return out, mapErr(err)
}
