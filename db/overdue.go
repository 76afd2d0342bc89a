package db

import (
	"context"
	"fmt"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// SyncOverdueAlerts opens a beam-level "overdue" alert (Level 1, so it
// goes to the daily digest) for every beam whose morning or monthly check
// is overdue at now (see Overdue and StatusOptions), and resolves the open
// overdue alert of a beam that is no longer overdue. Every change is
// audited.
func (d *DB) SyncOverdueAlerts(ctx context.Context, now time.Time, o StatusOptions) (opened, resolved int, err error) {
	if o.Location == nil {
		o.Location = time.Local
	}
	rows, err := d.Pool.Query(ctx, `SELECT b.id, b.machine_id, m.name, m.clinical, b.energy_mv, b.fff,
			(SELECT max(c.measured_at) FROM checks c WHERE c.beam_id = b.id AND c.kind = 'morning'),
			(SELECT max(c.measured_at) FROM checks c WHERE c.beam_id = b.id AND c.kind = 'monthly'),
			(SELECT a.id FROM alerts a WHERE a.beam_id = b.id AND a.series_id IS NULL AND a.family = 'overdue' AND a.state <> 'resolved')
		FROM beams b JOIN machines m ON m.id = b.machine_id ORDER BY b.id`)
	if err != nil {
		return 0, 0, mapErr(err)
	}
	type beamDue struct {
		beam, machine int64
		label, rule   string
		overdue       bool
		alert         *int64
	}
	var list []beamDue
	for rows.Next() {
		var b beamDue
		var name string
		var clinical, fff bool
		var energy float64
		var morning, monthly *time.Time
		if err := rows.Scan(&b.beam, &b.machine, &name, &clinical, &energy, &fff, &morning, &monthly, &b.alert); err != nil {
			rows.Close()
			return 0, 0, mapErr(err)
		}
		b.label = name + ", " + halfmark.BeamLabel(energy, fff)
		switch {
		case Overdue(morning, now, o.MorningInterval+o.MorningGrace, o.SkipWeekends, o.Location, clinical):
			b.overdue, b.rule = true, "morning check overdue"+since(morning)
		case Overdue(monthly, now, o.MonthlyInterval, false, o.Location, clinical):
			b.overdue, b.rule = true, "monthly check overdue"+since(monthly)
		}
		list = append(list, b)
	}
	if err := rows.Err(); err != nil {
		return 0, 0, mapErr(err)
	}
	for _, b := range list {
		switch {
		case b.overdue && b.alert == nil:
			err = d.tx(ctx, func(tx pgx.Tx) error {
				var id int64
				err := tx.QueryRow(ctx, `INSERT INTO alerts (machine_id, beam_id, family, rule, level, message, opened_at, updated_at)
					VALUES ($1, $2, 'overdue', $3, 1, $4, $5, $5)
					ON CONFLICT (beam_id, (coalesce(series_id, 0)), family) WHERE state <> 'resolved' DO NOTHING RETURNING id`,
					b.machine, b.beam, b.rule, b.label+": "+b.rule, now).Scan(&id)
				if err == pgx.ErrNoRows {
					return nil // another worker opened it
				}
				if err != nil {
					return err
				}
				opened++
				return audit(ctx, tx, AutoActor, "open", "alert", strconv.FormatInt(id, 10), map[string]any{"beam_id": b.beam, "rule": b.rule})
			})
		case !b.overdue && b.alert != nil:
			err = d.tx(ctx, func(tx pgx.Tx) error {
				tag, err := tx.Exec(ctx, `UPDATE alerts SET state = 'resolved', resolved_by = $2, resolved_at = $3, updated_at = $3,
					resolve_comment = 'the overdue check was done' WHERE id = $1 AND state <> 'resolved'`, *b.alert, AutoActor.Name, now)
				if err != nil || tag.RowsAffected() == 0 {
					return err
				}
				resolved++
				return audit(ctx, tx, AutoActor, "auto-resolve", "alert", strconv.FormatInt(*b.alert, 10), nil)
			})
		}
		if err != nil {
			return opened, resolved, err
		}
	}
	return opened, resolved, nil
}

func since(t *time.Time) string {
	if t == nil {
		return " (never done)"
	}
	return fmt.Sprintf(" (last %s)", t.UTC().Format("2006-01-02 15:04 UTC"))
}
