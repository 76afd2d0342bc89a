package db

import (
	"context"
	"slices"
	"time"

	"halfmark"
)

// StatusOptions say when a check is overdue (the domain type).
type StatusOptions = halfmark.StatusOptions

// DefaultStatusOptions are the defaults of StatusOptions.
var DefaultStatusOptions = halfmark.DefaultStatusOptions

// Status implements halfmark.StatusService with DefaultStatusOptions.
func (d *DB) Status(ctx context.Context) ([]halfmark.MachineStatus, error) {
	return d.StatusWith(ctx, d.Now(), DefaultStatusOptions)
}

// StatusWith answers the front page at now: machines ordered Level 3, 2,
// 1, then overdue, then in control (by name within each). A machine's
// level is the highest level of its active findings (the drift engine's
// decision); its worst is the most urgent of them (worstFindings). A beam is
// overdue when its last morning or monthly check is older than its
// interval; a beam that never had a check of that kind is overdue only on
// a clinical machine.
func (d *DB) StatusWith(ctx context.Context, now time.Time, o StatusOptions) ([]halfmark.MachineStatus, error) {
	if o.Location == nil {
		o.Location = time.Local
	}
	rows, err := d.Pool.Query(ctx, `SELECT m.id, m.name, m.clinical,
			coalesce((SELECT max(f.level) FROM findings f WHERE f.machine_id = m.id AND f.state <> 'resolved'), 0),
			(SELECT count(*) FROM findings f WHERE f.machine_id = m.id AND f.state <> 'resolved'),
			(SELECT count(*) FROM alerts a WHERE a.machine_id = m.id AND a.state <> 'resolved'),
			(SELECT max(c.measured_at) FROM checks c WHERE c.machine_id = m.id)
		FROM machines m ORDER BY m.name`)
	if err != nil {
		return nil, mapErr(err)
	}
	var out []halfmark.MachineStatus
	clinical := map[int64]bool{}
	idx := map[int64]int{}
	for rows.Next() {
		var ms halfmark.MachineStatus
		var cl bool
		if err := rows.Scan(&ms.ID, &ms.Name, &cl, &ms.Level, &ms.Findings, &ms.OpenAlerts, &ms.LastCheckAt); err != nil {
			rows.Close()
			return nil, mapErr(err)
		}
		clinical[ms.ID] = cl
		idx[ms.ID] = len(out)
		out = append(out, ms)
	}
	if err := rows.Err(); err != nil {
		return nil, mapErr(err)
	}
	if err := d.worstFindings(ctx, out, idx); err != nil {
		return nil, err
	}
	brows, err := d.Pool.Query(ctx, `SELECT b.machine_id,
			(SELECT max(c.measured_at) FROM checks c WHERE c.beam_id = b.id AND c.kind = 'morning'),
			(SELECT max(c.measured_at) FROM checks c WHERE c.beam_id = b.id AND c.kind = 'monthly')
		FROM beams b`)
	if err != nil {
		return nil, mapErr(err)
	}
	for brows.Next() {
		var mid int64
		var morning, monthly *time.Time
		if err := brows.Scan(&mid, &morning, &monthly); err != nil {
			brows.Close()
			return nil, mapErr(err)
		}
		i, ok := idx[mid]
		if !ok {
			continue
		}
		if Overdue(morning, now, o.MorningInterval+o.MorningGrace, o.SkipWeekends, o.Location, clinical[mid]) ||
			Overdue(monthly, now, o.MonthlyInterval, false, o.Location, clinical[mid]) {
			out[i].Overdue = true
		}
	}
	if err := brows.Err(); err != nil {
		return nil, mapErr(err)
	}
	slices.SortStableFunc(out, func(a, b halfmark.MachineStatus) int {
		ra, rb := rank(a), rank(b)
		if ra != rb {
			return rb - ra
		}
		return 0
	})
	return out, nil
}

// rank orders machines: Level 3, 2, 1 (4, 3, 2), overdue (1), in control (0).
func rank(m halfmark.MachineStatus) int {
	if m.Level > 0 {
		return int(m.Level) + 1
	}
	if m.Overdue {
		return 1
	}
	return 0
}

// worstFindings names each machine's most urgent active finding: the
// highest level, then the soonest projected tolerance crossing (how soon),
// then the largest |magnitude| (how far). The series fields are those of
// its first evidence series.
func (d *DB) worstFindings(ctx context.Context, out []halfmark.MachineStatus, idx map[int64]int) error {
	rows, err := d.Pool.Query(ctx, `SELECT DISTINCT ON (f.machine_id) f.machine_id, f.id, f.component_kind, f.component, f.level,
			f.magnitude_mm, f.message, (f.crossing->>'tolerance_date')::timestamptz,
			coalesce(s.id, 0), coalesce(s.beam_id, 0), b.energy_mv, b.fff, coalesce(s.edge, ''), coalesce(s.quantity, ''),
			coalesce(s.geometry, ''), coalesce(f.tolerance_mm, st.tolerance_mm), coalesce(f.action_mm, st.action_mm)
		FROM findings f
		LEFT JOIN series s ON s.id = (f.evidence->0->>'series_id')::bigint
		LEFT JOIN beams b ON b.id = s.beam_id
		LEFT JOIN series_state st ON st.series_id = s.id
		WHERE f.state <> 'resolved'
		ORDER BY f.machine_id, f.level DESC, (f.crossing->>'tolerance_date')::timestamptz NULLS LAST, abs(f.magnitude_mm) DESC, f.id`)
	if err != nil {
		return mapErr(err)
	}
	defer rows.Close()
	for rows.Next() {
		var mid, fid int64
		var w halfmark.WorstSeries
		var energy *float64
		var fff *bool
		var q, kind string
		var level int
		var mag float64
		if err := rows.Scan(&mid, &fid, &kind, &w.Component, &level, &mag, &w.Rule, &w.ProjectedCrossing,
			&w.SeriesID, &w.BeamID, &energy, &fff, &w.Edge, &q, &w.Geometry, &w.ToleranceMM, &w.ActionMM); err != nil {
			return mapErr(err)
		}
		w.FindingID, w.ComponentKind, w.DeviationMM = &fid, halfmark.ComponentKind(kind), &mag
		w.Quantity = halfmark.Quantity(q)
		if energy != nil {
			w.BeamLabel = halfmark.BeamLabel(*energy, fff != nil && *fff)
		}
		if i, ok := idx[mid]; ok {
			out[i].Worst = &w
		}
	}
	return mapErr(rows.Err())
}

// Overdue reports whether a check last done at last (nil: never) is
// overdue at now for the given interval. With skipWeekends, the hours of
// Saturdays and Sundays in loc between last and now do not count. A check
// never done is overdue only when clinical is true.
func Overdue(last *time.Time, now time.Time, interval time.Duration, skipWeekends bool, loc *time.Location, clinical bool) bool {
	if last == nil {
		return clinical
	}
	elapsed := now.Sub(*last)
	if skipWeekends {
		elapsed -= weekendTime(*last, now, loc)
	}
	return elapsed > interval
}

// weekendTime is the part of [from, to] that falls on a Saturday or Sunday
// in loc.
func weekendTime(from, to time.Time, loc *time.Location) time.Duration {
	if !to.After(from) {
		return 0
	}
	var total time.Duration
	f := from.In(loc)
	day := time.Date(f.Year(), f.Month(), f.Day(), 0, 0, 0, 0, loc)
	for day.Before(to) {
		next := day.AddDate(0, 0, 1)
		if wd := day.Weekday(); wd == time.Saturday || wd == time.Sunday {
			s, e := maxTime(day, from), minTime(next, to)
			if e.After(s) {
				total += e.Sub(s)
			}
		}
		day = next
	}
	return total
}

func maxTime(a, b time.Time) time.Time {
	if a.After(b) {
		return a
	}
	return b
}

func minTime(a, b time.Time) time.Time {
	if a.Before(b) {
		return a
	}
	return b
}

var _ halfmark.StatusService = (*DB)(nil)
