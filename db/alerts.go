package db

import (
	"context"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

const alertSelect = `SELECT a.id, a.machine_id, m.name, a.beam_id, b.energy_mv, b.fff, a.series_id, a.edge, a.quantity,
		a.geometry, a.family, a.rule, a.level, a.state, a.message, a.deviation_mm, a.tolerance_mm, a.action_mm,
		a.projected_crossing, a.opened_at, a.updated_at, coalesce(a.ack_by, ''), a.ack_at, coalesce(a.ack_comment, ''),
		coalesce(a.resolved_by, ''), a.resolved_at, coalesce(a.resolve_comment, '')
	FROM alerts a JOIN machines m ON m.id = a.machine_id JOIN beams b ON b.id = a.beam_id`

func scanAlert(r pgx.Row) (halfmark.Alert, error) {
	var al halfmark.Alert
	var energy float64
	var fff bool
	var q, state string
	err := r.Scan(&al.ID, &al.MachineID, &al.MachineName, &al.BeamID, &energy, &fff, &al.SeriesID, &al.Edge, &q,
		&al.Geometry, &al.Family, &al.Rule, &al.Level, &state, &al.Message, &al.DeviationMM, &al.ToleranceMM, &al.ActionMM,
		&al.ProjectedCrossing, &al.OpenedAt, &al.UpdatedAt, &al.AckBy, &al.AckAt, &al.AckComment,
		&al.ResolvedBy, &al.ResolvedAt, &al.ResolveComment)
	al.BeamLabel = halfmark.BeamLabel(energy, fff)
	al.Quantity, al.State = halfmark.Quantity(q), halfmark.AlertState(state)
	return al, err
}

// Alerts implements halfmark.AlertService.
func (d *DB) Alerts(ctx context.Context, f halfmark.AlertFilter) ([]halfmark.Alert, error) {
	states := f.States
	if len(states) == 0 {
		states = []halfmark.AlertState{halfmark.AlertOpen, halfmark.AlertAcknowledged}
	}
	ss := make([]string, len(states))
	for i, s := range states {
		switch s {
		case halfmark.AlertOpen, halfmark.AlertAcknowledged, halfmark.AlertResolved:
		default:
			return nil, halfmark.Invalid("the alert filter is not valid", halfmark.FieldError{Field: "state",
				Message: "must be open, acknowledged or resolved (got " + strconv.Quote(string(s)) + ")"})
		}
		ss[i] = string(s)
	}
	limit := f.Limit
	if limit <= 0 || limit > 5000 {
		limit = 500
	}
	rows, err := d.Pool.Query(ctx, alertSelect+`
		WHERE ($1 = 0 OR a.machine_id = $1) AND ($2 = 0 OR a.series_id = $2) AND a.state = ANY($3)
		ORDER BY a.level DESC, a.updated_at DESC, a.id DESC LIMIT $4`, f.MachineID, f.SeriesID, ss, limit)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Alert, error) { return scanAlert(r) })
	return out, mapErr(err)
}

// Alert implements halfmark.AlertService.
func (d *DB) Alert(ctx context.Context, id int64) (halfmark.Alert, error) {
	al, err := scanAlert(d.Pool.QueryRow(ctx, alertSelect+` WHERE a.id = $1`, id))
	if err == pgx.ErrNoRows {
		return al, halfmark.Errorf(halfmark.ENotFound, "alert %d does not exist", id)
	}
	return al, mapErr(err)
}

// Acknowledge implements halfmark.AlertService. Acknowledging a CUSUM
// alert restarts the series' CUSUM after its newest evaluated point, so
// that the chart watches for a new shift rather than repeating the old one.
func (d *DB) Acknowledge(ctx context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Alert, error) {
	comment = strings.TrimSpace(comment)
	if len(comment) > 4000 {
		return halfmark.Alert{}, halfmark.Invalid("the acknowledgement is not valid", halfmark.FieldError{Field: "comment", Message: "is over 4000 characters; shorten it"})
	}
	err := d.tx(ctx, func(tx pgx.Tx) error {
		var state, family string
		var seriesID *int64
		err := tx.QueryRow(ctx, `SELECT state, family, series_id FROM alerts WHERE id = $1 FOR UPDATE`, id).Scan(&state, &family, &seriesID)
		if err == pgx.ErrNoRows {
			return halfmark.Errorf(halfmark.ENotFound, "alert %d does not exist", id)
		}
		if err != nil {
			return err
		}
		if state != string(halfmark.AlertOpen) {
			return halfmark.Errorf(halfmark.EConflict, "alert %d is %s, not open; only an open alert can be acknowledged", id, state)
		}
		if _, err := tx.Exec(ctx, `UPDATE alerts SET state = 'acknowledged', ack_by = $2, ack_at = $3, ack_comment = $4, updated_at = $3
			WHERE id = $1`, id, a.Name, d.Now(), comment); err != nil {
			return err
		}
		if family == "cusum" && seriesID != nil {
			if _, err := tx.Exec(ctx, `UPDATE series_state SET cusum_restart_at = last_measured_at WHERE series_id = $1`, *seriesID); err != nil {
				return err
			}
		}
		return audit(ctx, tx, a, "acknowledge", "alert", strconv.FormatInt(id, 10), map[string]any{"comment": comment})
	})
	if err != nil {
		return halfmark.Alert{}, err
	}
	return d.Alert(ctx, id)
}

// Resolve implements halfmark.AlertService.
func (d *DB) Resolve(ctx context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Alert, error) {
	comment = strings.TrimSpace(comment)
	if comment == "" || len(comment) > 4000 {
		return halfmark.Alert{}, halfmark.Invalid("the resolution is not valid", halfmark.FieldError{Field: "comment",
			Message: "is required (up to 4000 characters): say what was found or done"})
	}
	err := d.tx(ctx, func(tx pgx.Tx) error {
		var state string
		err := tx.QueryRow(ctx, `SELECT state FROM alerts WHERE id = $1 FOR UPDATE`, id).Scan(&state)
		if err == pgx.ErrNoRows {
			return halfmark.Errorf(halfmark.ENotFound, "alert %d does not exist", id)
		}
		if err != nil {
			return err
		}
		if state == string(halfmark.AlertResolved) {
			return halfmark.Errorf(halfmark.EConflict, "alert %d is already resolved", id)
		}
		if _, err := tx.Exec(ctx, `UPDATE alerts SET state = 'resolved', resolved_by = $2, resolved_at = $3, resolve_comment = $4, updated_at = $3
			WHERE id = $1`, id, a.Name, d.Now(), comment); err != nil {
			return err
		}
		return audit(ctx, tx, a, "resolve", "alert", strconv.FormatInt(id, 10), map[string]any{"comment": comment})
	})
	if err != nil {
		return halfmark.Alert{}, err
	}
	return d.Alert(ctx, id)
}

var _ halfmark.AlertService = (*DB)(nil)
