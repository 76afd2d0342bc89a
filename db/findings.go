package db

import (
	"context"
	"encoding/json"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

const findingCols = `f.id, f.machine_id, m.name, f.component_kind, f.component, f.direction, f.level, f.state,
	f.magnitude_mm, f.magnitude_lo_mm, f.magnitude_hi_mm, f.onset, f.crossing, f.evidence, f.cause, f.message, f.tolerance_mm, f.action_mm,
	f.opened_at, f.updated_at, coalesce(f.ack_by, ''), f.ack_at, coalesce(f.ack_comment, ''),
	coalesce(f.resolved_by, ''), f.resolved_at, coalesce(f.resolve_comment, '')`

const findingFrom = ` FROM findings f JOIN machines m ON m.id = f.machine_id`

func scanFinding(r pgx.Row) (halfmark.Finding, error) {
	var f halfmark.Finding
	var kind, state string
	var level int
	var crossing, evidence, cause []byte
	var tol, act *float64
	err := r.Scan(&f.ID, &f.MachineID, &f.Machine, &kind, &f.Name, &f.Direction, &level, &state,
		&f.MagnitudeMM, &f.MagnitudeCIMM[0], &f.MagnitudeCIMM[1], &f.Onset, &crossing, &evidence, &cause, &f.Message, &tol, &act,
		&f.OpenedAt, &f.UpdatedAt, &f.AckBy, &f.AckAt, &f.AckComment, &f.ResolvedBy, &f.ResolvedAt, &f.ResolveComment)
	if err != nil {
		return f, err
	}
	f.Kind, f.Level, f.State = halfmark.ComponentKind(kind), halfmark.Level(level), halfmark.FindingState(state)
	if tol != nil && act != nil {
		f.Limits = &halfmark.Limits{ToleranceMM: *tol, ActionMM: *act}
	}
	if err := json.Unmarshal(crossing, &f.Crossing); err != nil {
		return f, fmt.Errorf("finding %d: crossing: %w", f.ID, err)
	}
	if err := json.Unmarshal(evidence, &f.Evidence); err != nil {
		return f, fmt.Errorf("finding %d: evidence: %w", f.ID, err)
	}
	if len(cause) > 0 && string(cause) != "null" {
		f.Cause = new(halfmark.PenumbraCause)
		if err := json.Unmarshal(cause, f.Cause); err != nil {
			return f, fmt.Errorf("finding %d: cause: %w", f.ID, err)
		}
	}
	if f.Evidence == nil {
		f.Evidence = []halfmark.Evidence{}
	}
	return f, nil
}

// Findings implements halfmark.FindingService.
func (d *DB) Findings(ctx context.Context, fl halfmark.FindingFilter) ([]halfmark.Finding, error) {
	state, err := halfmark.ParseFindingState(fl.State)
	if err != nil {
		return nil, halfmark.Invalid("the filter is not valid", halfmark.FieldError{Field: "state", Message: err.Error()})
	}
	var where []string
	var args []any
	arg := func(v any) string { args = append(args, v); return "$" + strconv.Itoa(len(args)) }
	switch state {
	case "active":
		where = append(where, "f.state <> 'resolved'")
	case "all":
	default:
		where = append(where, "f.state = "+arg(state))
	}
	if fl.MachineID > 0 {
		where = append(where, "f.machine_id = "+arg(fl.MachineID))
	}
	if !fl.From.IsZero() && !fl.To.IsZero() {
		where = append(where, "f.opened_at < "+arg(fl.To), "(f.resolved_at IS NULL OR f.resolved_at >= "+arg(fl.From)+")")
	}
	q := `SELECT ` + findingCols + findingFrom
	if len(where) > 0 {
		q += " WHERE " + strings.Join(where, " AND ")
	}
	q += " ORDER BY (f.state = 'resolved'), f.level DESC, f.updated_at DESC, f.id DESC"
	if fl.Limit > 0 {
		q += " LIMIT " + arg(fl.Limit)
	}
	rows, err := d.Pool.Query(ctx, q, args...)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Finding, error) { return scanFinding(r) })
	if out == nil {
		out = []halfmark.Finding{}
	}
	return out, mapErr(err)
}

// Finding implements halfmark.FindingService.
func (d *DB) Finding(ctx context.Context, id int64) (halfmark.Finding, error) {
	f, err := scanFinding(d.Pool.QueryRow(ctx, `SELECT `+findingCols+findingFrom+` WHERE f.id = $1`, id))
	if err == pgx.ErrNoRows {
		return f, halfmark.Errorf(halfmark.ENotFound, "finding %d does not exist", id)
	}
	return f, mapErr(err)
}

// AcknowledgeFinding implements halfmark.FindingService: the finding and
// its evidence alerts are acknowledged together, and the CUSUM of every
// evidence series restarts after its newest point (Halfmark's convention
// after an acknowledged signal).
func (d *DB) AcknowledgeFinding(ctx context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Finding, error) {
	if err := halfmark.ValidateComment("comment", comment, false); err != nil {
		return halfmark.Finding{}, err
	}
	comment = strings.TrimSpace(comment)
	err := d.tx(ctx, func(tx pgx.Tx) error {
		var state string
		err := tx.QueryRow(ctx, `SELECT state FROM findings WHERE id = $1 FOR UPDATE`, id).Scan(&state)
		if err == pgx.ErrNoRows {
			return halfmark.Errorf(halfmark.ENotFound, "finding %d does not exist", id)
		}
		if err != nil {
			return err
		}
		if state != string(halfmark.FindingOpen) {
			return halfmark.Errorf(halfmark.EConflict, "finding %d is %s, not open; only an open finding can be acknowledged", id, state)
		}
		now := d.Now()
		if _, err := tx.Exec(ctx, `UPDATE findings SET state = 'acknowledged', ack_by = $2, ack_at = $3, ack_comment = $4, updated_at = $3
			WHERE id = $1`, id, a.Name, now, comment); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, `UPDATE alerts SET state = 'acknowledged', ack_by = $2, ack_at = $3, ack_comment = $4, updated_at = $3
			WHERE finding_id = $1 AND state = 'open'`, id, a.Name, now, "with finding "+strconv.FormatInt(id, 10)+": "+comment); err != nil {
			return err
		}
		if _, err := tx.Exec(ctx, `UPDATE series_state SET cusum_restart_at = last_measured_at
			WHERE series_id IN (SELECT (e->>'series_id')::bigint FROM findings, jsonb_array_elements(evidence) e WHERE id = $1)`, id); err != nil {
			return err
		}
		return audit(ctx, tx, a, "acknowledge", "finding", strconv.FormatInt(id, 10), map[string]any{"comment": comment})
	})
	if err != nil {
		return halfmark.Finding{}, mapErr(err)
	}
	return d.Finding(ctx, id)
}

// ResolveFinding implements halfmark.FindingService; its evidence alerts
// are resolved with it.
func (d *DB) ResolveFinding(ctx context.Context, a halfmark.Actor, id int64, comment string) (halfmark.Finding, error) {
	comment = strings.TrimSpace(comment)
	if comment == "" {
		return halfmark.Finding{}, halfmark.Invalid("the resolution is not valid", halfmark.FieldError{Field: "comment",
			Message: "is required: say what was found or done"})
	}
	if err := halfmark.ValidateComment("comment", comment, true); err != nil {
		return halfmark.Finding{}, err
	}
	err := d.tx(ctx, func(tx pgx.Tx) error {
		var state string
		err := tx.QueryRow(ctx, `SELECT state FROM findings WHERE id = $1 FOR UPDATE`, id).Scan(&state)
		if err == pgx.ErrNoRows {
			return halfmark.Errorf(halfmark.ENotFound, "finding %d does not exist", id)
		}
		if err != nil {
			return err
		}
		if state == string(halfmark.FindingResolved) {
			return halfmark.Errorf(halfmark.EConflict, "finding %d is already resolved", id)
		}
		return resolveFinding(ctx, tx, a, id, comment, d.Now())
	})
	if err != nil {
		return halfmark.Finding{}, mapErr(err)
	}
	return d.Finding(ctx, id)
}

func resolveFinding(ctx context.Context, tx pgx.Tx, a halfmark.Actor, id int64, comment string, now time.Time) error {
	if _, err := tx.Exec(ctx, `UPDATE findings SET state = 'resolved', resolved_by = $2, resolved_at = $3, resolve_comment = $4, updated_at = $3
		WHERE id = $1`, id, a.Name, now, comment); err != nil {
		return err
	}
	if _, err := tx.Exec(ctx, `UPDATE alerts SET state = 'resolved', resolved_by = $2, resolved_at = $3, resolve_comment = $4, updated_at = $3
		WHERE finding_id = $1 AND state <> 'resolved'`, id, a.Name, now, "with finding "+strconv.FormatInt(id, 10)+": "+comment); err != nil {
		return err
	}
	action := "resolve"
	if a.Name == AutoActor.Name {
		action = "auto-resolve"
	}
	return audit(ctx, tx, a, action, "finding", strconv.FormatInt(id, 10), map[string]any{"comment": comment})
}

// AcknowledgeMachineFindings acknowledges every open finding of a machine
// (bulk acknowledge) and returns how many it acknowledged.
func (d *DB) AcknowledgeMachineFindings(ctx context.Context, a halfmark.Actor, machineID int64, comment string) (int, error) {
	if _, err := d.Machine(ctx, machineID); err != nil {
		return 0, err
	}
	fs, err := d.Findings(ctx, halfmark.FindingFilter{MachineID: machineID, State: "open"})
	if err != nil {
		return 0, err
	}
	n := 0
	for _, f := range fs {
		if _, err := d.AcknowledgeFinding(ctx, a, f.ID, comment); err != nil {
			if halfmark.ErrorCodeOf(err) == halfmark.EConflict {
				continue // acknowledged by someone else meanwhile
			}
			return n, err
		}
		n++
	}
	return n, nil
}

// SeriesEvaluation implements halfmark.EvaluationService.
func (d *DB) SeriesEvaluation(ctx context.Context, seriesID int64) (halfmark.SeriesEvaluation, error) {
	var raw []byte
	err := d.Pool.QueryRow(ctx, `SELECT st.evaluation FROM series s LEFT JOIN series_state st ON st.series_id = s.id WHERE s.id = $1`, seriesID).Scan(&raw)
	if err == pgx.ErrNoRows {
		return halfmark.SeriesEvaluation{}, halfmark.Errorf(halfmark.ENotFound, "series %d does not exist", seriesID)
	}
	if err != nil {
		return halfmark.SeriesEvaluation{}, mapErr(err)
	}
	if len(raw) == 0 {
		return halfmark.SeriesEvaluation{}, halfmark.Errorf(halfmark.ENotFound, "series %d has not been evaluated yet; the worker evaluates new points within a minute", seriesID)
	}
	var ev halfmark.SeriesEvaluation
	if err := json.Unmarshal(raw, &ev); err != nil {
		return ev, fmt.Errorf("series %d: stored evaluation: %w", seriesID, err)
	}
	return ev, nil
}

// MachineEvaluations returns the stored evaluation of every evaluated
// series of a machine, without their charts' points, keyed by series id.
func (d *DB) MachineEvaluations(ctx context.Context, machineID int64) (map[int64]halfmark.SeriesEvaluation, error) {
	rows, err := d.Pool.Query(ctx, `SELECT st.series_id, st.evaluation - 'chart' FROM series_state st JOIN series s ON s.id = st.series_id
		WHERE s.machine_id = $1 AND st.evaluation IS NOT NULL`, machineID)
	if err != nil {
		return nil, mapErr(err)
	}
	defer rows.Close()
	out := map[int64]halfmark.SeriesEvaluation{}
	for rows.Next() {
		var id int64
		var raw []byte
		if err := rows.Scan(&id, &raw); err != nil {
			return nil, mapErr(err)
		}
		var ev halfmark.SeriesEvaluation
		if err := json.Unmarshal(raw, &ev); err != nil {
			return nil, fmt.Errorf("series %d: stored evaluation: %w", id, err)
		}
		out[id] = ev
	}
	return out, mapErr(rows.Err())
}

// MachinesToEvaluate implements halfmark.EvaluationStore: a machine is
// evaluated when any of its series is new, has a check stored since its
// last evaluation, or a baseline stored (or coming into force) since then.
func (d *DB) MachinesToEvaluate(ctx context.Context, changedOnly bool) ([]int64, error) {
	q := `SELECT id FROM machines ORDER BY id`
	if changedOnly {
		q = `SELECT DISTINCT s.machine_id FROM series s LEFT JOIN series_state st ON st.series_id = s.id
			WHERE st.series_id IS NULL OR st.evaluation IS NULL
			   OR EXISTS (SELECT 1 FROM checks c WHERE c.machine_id = s.machine_id AND c.beam_id = s.beam_id
			              AND c.geometry = s.geometry AND c.method = s.method AND c.created_at > coalesce(st.last_created_at, '-infinity'))
			   OR EXISTS (SELECT 1 FROM baselines b WHERE b.series_id = s.id
			              AND (b.created_at > st.evaluated_at OR b.valid_from BETWEEN st.evaluated_at AND now()))
			ORDER BY 1`
	}
	rows, err := d.Pool.Query(ctx, q)
	if err != nil {
		return nil, mapErr(err)
	}
	ids, err := pgx.CollectRows(rows, pgx.RowTo[int64])
	return ids, mapErr(err)
}

// LoadMachineSeries implements halfmark.EvaluationStore.
func (d *DB) LoadMachineSeries(ctx context.Context, machineID int64, at time.Time) ([]halfmark.SeriesData, error) {
	rows, err := d.Pool.Query(ctx, `SELECT id FROM series WHERE machine_id = $1 ORDER BY id`, machineID)
	if err != nil {
		return nil, mapErr(err)
	}
	ids, err := pgx.CollectRows(rows, pgx.RowTo[int64])
	if err != nil {
		return nil, mapErr(err)
	}
	es, err := d.LoadEvalSeries(ctx, ids, at)
	if err != nil {
		return nil, err
	}
	out := make([]halfmark.SeriesData, len(es))
	for i := range es {
		out[i] = es[i].Data()
	}
	return out, nil
}

// Data is the series as the drift engine reads it.
func (e *EvalSeries) Data() halfmark.SeriesData {
	return halfmark.SeriesData{ID: e.ID, MachineID: e.MachineID, BeamID: e.BeamID, MachineName: e.MachineName,
		BeamLabel: e.BeamLabel, Geometry: e.Geometry, Edge: e.Edge, Quantity: e.Quantity, Method: e.Method,
		Clinical: e.Clinical, BaselineValueMM: e.BaselineValueMM, BaselineSigmaMM: e.BaselineSigmaMM,
		BaselineFrom: e.BaselineFrom, CUSUMRestart: e.CUSUMRestart, Times: e.Times, ValuesMM: e.ValuesMM,
		Kinds: e.Kinds, CheckIDs: e.CheckIDs, LastCreatedAt: e.LastCreatedAt}
}

// RecordMachineEvaluation implements halfmark.EvaluationStore: in one
// transaction it stores every series' evaluation (with its chart, which
// every screen reads), opens, updates, escalates or resolves the machine's
// findings, keeps the per-series alerts as their evidence (never notified on
// their own) and writes the notifications of findings that opened or
// escalated to Level 2 or 3.
func (d *DB) RecordMachineEvaluation(ctx context.Context, ev *halfmark.MachineEvaluation, n halfmark.FindingNotifier) error {
	return d.tx(ctx, func(tx pgx.Tx) error {
		// One machine's evaluations are stored one at a time, whatever the
		// number of workers: the findings of a component stay unique.
		if _, err := tx.Exec(ctx, `SELECT pg_advisory_xact_lock(hashtextextended('halfmark-machine-evaluation', $1))`, ev.MachineID); err != nil {
			return err
		}
		bySeries := map[int64][]int64{} // series → active findings it is evidence of
		for i := range ev.Components {
			c := &ev.Components[i]
			id, err := d.recordComponent(ctx, tx, ev, c, n)
			if err != nil {
				return err
			}
			if id > 0 && c.Active {
				for _, e := range c.Finding.Evidence {
					bySeries[e.SeriesID] = append(bySeries[e.SeriesID], id)
				}
			}
		}
		if err := storeSeriesVerdicts(ctx, tx, ev, bySeries); err != nil {
			return err
		}
		var back []int64
		for i := range ev.Series {
			sv := &ev.Series[i]
			var fid *int64
			if ids := bySeries[sv.Series.ID]; len(ids) > 0 {
				fid = &ids[0]
			}
			for _, s := range sv.Signals {
				if err := raiseEvidenceAlert(ctx, tx, ev.At, sv, s, fid); err != nil {
					return err
				}
			}
			if sv.BackInControl {
				back = append(back, sv.Series.ID)
			}
		}
		if len(back) > 0 {
			return autoResolveSeries(ctx, tx, back, d.Now())
		}
		return nil
	})
}

// storeSeriesVerdicts writes one evaluations row per series and its state,
// the stored evaluation with its chart included.
func storeSeriesVerdicts(ctx context.Context, tx pgx.Tx, ev *halfmark.MachineEvaluation, bySeries map[int64][]int64) error {
	n := len(ev.Series)
	if n == 0 {
		return nil
	}
	ids, levels := make([]int64, n), make([]int32, n)
	ats, hashes, rules := make([]time.Time, n), make([]string, n), make([]string, n)
	details, full := make([]string, n), make([]string, n)
	dev, tol, act := make([]*float64, n), make([]*float64, n), make([]*float64, n)
	proj, lastM, lastC := make([]*time.Time, n), make([]*time.Time, n), make([]*time.Time, n)
	for i := range ev.Series {
		sv := &ev.Series[i]
		e := sv.Evaluation
		e.FindingIDs = bySeries[sv.Series.ID]
		if e.FindingIDs == nil {
			e.FindingIDs = []int64{}
		}
		b, err := json.Marshal(e)
		if err != nil {
			return fmt.Errorf("evaluation of series %d: %w", sv.Series.ID, err)
		}
		full[i] = string(b)
		e.Chart.Points = nil
		if b, err = json.Marshal(e); err != nil {
			return fmt.Errorf("evaluation of series %d: %w", sv.Series.ID, err)
		}
		details[i] = string(b)
		ids[i], levels[i], ats[i], hashes[i], rules[i] = sv.Series.ID, int32(e.Level), ev.At, ev.ToleranceHash, e.Rule
		dev[i] = e.DeviationMM
		if e.Limits != nil {
			tol[i], act[i] = &e.Limits.ToleranceMM, &e.Limits.ActionMM
		}
		proj[i] = e.Crossing.ToleranceDate
		if k := len(sv.Series.Times); k > 0 {
			lastM[i] = &sv.Series.Times[k-1]
		}
		if !sv.Series.LastCreatedAt.IsZero() {
			lastC[i] = &sv.Series.LastCreatedAt
		}
	}
	if _, err := tx.Exec(ctx, `INSERT INTO evaluations (series_id, at, tolerance_hash, level, rule, details)
		SELECT * FROM unnest($1::bigint[], $2::timestamptz[], $3::text[], $4::int[], $5::text[], $6::jsonb[])`,
		ids, ats, hashes, levels, rules, details); err != nil {
		return fmt.Errorf("store evaluations: %w", err)
	}
	if _, err := tx.Exec(ctx, `INSERT INTO series_state AS st (series_id, evaluated_at, last_created_at, last_measured_at, level, rule,
			deviation_mm, tolerance_mm, action_mm, projected_crossing, tolerance_hash, evaluation)
		SELECT * FROM unnest($1::bigint[], $2::timestamptz[], $3::timestamptz[], $4::timestamptz[], $5::int[], $6::text[],
			$7::float8[], $8::float8[], $9::float8[], $10::timestamptz[], $11::text[], $12::jsonb[])
		ON CONFLICT (series_id) DO UPDATE SET evaluated_at = EXCLUDED.evaluated_at,
			last_created_at = greatest(st.last_created_at, EXCLUDED.last_created_at),
			last_measured_at = EXCLUDED.last_measured_at, level = EXCLUDED.level, rule = EXCLUDED.rule,
			deviation_mm = EXCLUDED.deviation_mm, tolerance_mm = EXCLUDED.tolerance_mm, action_mm = EXCLUDED.action_mm,
			projected_crossing = EXCLUDED.projected_crossing, tolerance_hash = EXCLUDED.tolerance_hash,
			evaluation = EXCLUDED.evaluation`,
		ids, ats, lastC, lastM, levels, rules, dev, tol, act, proj, hashes, full); err != nil {
		return fmt.Errorf("store series state: %w", err)
	}
	return nil
}

// recordComponent applies one component verdict to the findings table and
// returns the id of the component's active finding (0: none).
func (d *DB) recordComponent(ctx context.Context, tx pgx.Tx, ev *halfmark.MachineEvaluation, c *halfmark.ComponentVerdict, n halfmark.FindingNotifier) (int64, error) {
	f := &c.Finding
	if f.Direction != 1 && f.Direction != -1 {
		f.Direction = 1
	}
	var id int64
	var old, notified int
	var state string
	err := tx.QueryRow(ctx, `SELECT id, level, notified_level, state FROM findings
		WHERE machine_id = $1 AND component_kind = $2 AND component = $3 AND direction = $4 AND state <> 'resolved' FOR UPDATE`,
		ev.MachineID, string(f.Kind), f.Name, f.Direction).Scan(&id, &old, &notified, &state)
	if err != nil && err != pgx.ErrNoRows {
		return 0, fmt.Errorf("find the active finding of %s: %w", f.Component, err)
	}
	exists := err == nil
	if !c.Active {
		if exists && c.BackInControl {
			return 0, resolveFinding(ctx, tx, AutoActor, id, "back in control: the component's newest sessions show no signal", ev.At)
		}
		if exists {
			return id, nil
		}
		return 0, nil
	}
	if f.Level < halfmark.LevelInspect {
		f.Level = halfmark.LevelInspect
	}
	crossing, err := json.Marshal(f.Crossing)
	if err != nil {
		return 0, err
	}
	if f.Evidence == nil {
		f.Evidence = []halfmark.Evidence{}
	}
	evidence, err := json.Marshal(f.Evidence)
	if err != nil {
		return 0, err
	}
	var tol, act *float64
	if f.Limits != nil {
		tol, act = &f.Limits.ToleranceMM, &f.Limits.ActionMM
	}
	var cause []byte
	if f.Cause != nil {
		if cause, err = json.Marshal(f.Cause); err != nil {
			return 0, err
		}
	}
	if !exists {
		err := tx.QueryRow(ctx, `INSERT INTO findings (machine_id, component_kind, component, direction, level, magnitude_mm,
				magnitude_lo_mm, magnitude_hi_mm, onset, crossing, evidence, cause, message, opened_at, updated_at, tolerance_mm, action_mm)
			VALUES ($1,$2,$3,$4,$5,$6,$7,$8,$9,$10,$11,$12,$13,$14,$14,$15,$16) RETURNING id`,
			ev.MachineID, string(f.Kind), f.Name, f.Direction, int(f.Level), f.MagnitudeMM, f.MagnitudeCIMM[0], f.MagnitudeCIMM[1],
			f.Onset, crossing, evidence, cause, f.Message, ev.At, tol, act).Scan(&id)
		if err != nil {
			return 0, fmt.Errorf("open the finding of %s: %w", f.Component, err)
		}
		if err := audit(ctx, tx, AutoActor, "open", "finding", strconv.FormatInt(id, 10),
			map[string]any{"component": f.Component.String(), "level": f.Level, "magnitude_mm": f.MagnitudeMM}); err != nil {
			return 0, err
		}
	} else {
		escalated := int(f.Level) > old
		newState := state
		if escalated {
			newState = string(halfmark.FindingOpen) // escalation re-opens an acknowledged finding
		}
		if _, err := tx.Exec(ctx, `UPDATE findings SET level = $2, magnitude_mm = $3, magnitude_lo_mm = $4, magnitude_hi_mm = $5,
				onset = $6, crossing = $7, evidence = $8, cause = $9, message = $10, updated_at = $11, state = $12,
				tolerance_mm = $13, action_mm = $14 WHERE id = $1`,
			id, int(f.Level), f.MagnitudeMM, f.MagnitudeCIMM[0], f.MagnitudeCIMM[1], f.Onset, crossing, evidence, cause,
			f.Message, ev.At, newState, tol, act); err != nil {
			return 0, fmt.Errorf("update finding %d: %w", id, err)
		}
		if escalated {
			if err := audit(ctx, tx, AutoActor, "escalate", "finding", strconv.FormatInt(id, 10),
				map[string]any{"level": f.Level, "previous_level": old}); err != nil {
				return 0, err
			}
		}
	}
	if f.Level >= halfmark.LevelScheduled && int(f.Level) > notified && n != nil {
		stored, err := scanFinding(tx.QueryRow(ctx, `SELECT `+findingCols+findingFrom+` WHERE f.id = $1`, id))
		if err != nil {
			return 0, fmt.Errorf("read finding %d for its notification: %w", id, err)
		}
		if err := insertNotifications(ctx, tx, n.FindingNotifications(stored), d.Now()); err != nil {
			return 0, err
		}
		if _, err := tx.Exec(ctx, `UPDATE findings SET notified_level = $2 WHERE id = $1`, id, int(f.Level)); err != nil {
			return 0, err
		}
	}
	return id, nil
}

// raiseEvidenceAlert opens or updates the per-series alert of a signal, as
// evidence of finding fid (may be nil). It is never notified on its own.
func raiseEvidenceAlert(ctx context.Context, tx pgx.Tx, at time.Time, sv *halfmark.SeriesVerdict, s halfmark.SeriesSignal, fid *int64) error {
	sr, e := &sv.Series, &sv.Evaluation
	var tol, act *float64
	if e.Limits != nil {
		tol, act = &e.Limits.ToleranceMM, &e.Limits.ActionMM
	}
	var last *time.Time
	if k := len(sr.Times); k > 0 {
		last = &sr.Times[k-1]
	}
	tag, err := tx.Exec(ctx, `INSERT INTO alerts (machine_id, beam_id, series_id, edge, quantity, geometry, family, rule, level, message,
			deviation_mm, tolerance_mm, action_mm, projected_crossing, signal_at, opened_at, updated_at, finding_id)
		VALUES ($1,$2,$3,$4,$5,$6,$7,$8,$9,$10,$11,$12,$13,$14,$15,$16,$16,$17)
		ON CONFLICT (beam_id, (coalesce(series_id, 0)), family) WHERE state <> 'resolved' DO UPDATE SET
			rule = EXCLUDED.rule, level = greatest(alerts.level, EXCLUDED.level), message = EXCLUDED.message,
			deviation_mm = EXCLUDED.deviation_mm, tolerance_mm = EXCLUDED.tolerance_mm, action_mm = EXCLUDED.action_mm,
			projected_crossing = EXCLUDED.projected_crossing, signal_at = EXCLUDED.signal_at, updated_at = EXCLUDED.updated_at,
			finding_id = coalesce(EXCLUDED.finding_id, alerts.finding_id)`,
		sr.MachineID, sr.BeamID, sr.ID, sr.Edge, string(sr.Quantity), sr.Geometry, s.Family, s.Rule, int(s.Level), s.Message,
		e.DeviationMM, tol, act, e.Crossing.ToleranceDate, last, at, fid)
	if err != nil {
		return fmt.Errorf("record the %s signal of series %d: %w", s.Family, sr.ID, err)
	}
	_ = tag
	return nil
}

// autoResolveSeries resolves the unresolved alerts of series back in
// control.
func autoResolveSeries(ctx context.Context, tx pgx.Tx, seriesIDs []int64, now time.Time) error {
	_, err := tx.Exec(ctx, `UPDATE alerts SET state = 'resolved', resolved_by = $2, resolved_at = $3, updated_at = $3,
			resolve_comment = 'back in control: the newest points show no signal'
		WHERE series_id = ANY($1) AND state <> 'resolved'`, seriesIDs, AutoActor.Name, now)
	return err
}

// insertNotifications writes outbox rows inside tx; a repeated dedupe key
// adds nothing.
func insertNotifications(ctx context.Context, tx pgx.Tx, ns []halfmark.Notification, now time.Time) error {
	for _, r := range ns {
		recips := r.Recipients
		if recips == nil {
			recips = []string{}
		}
		var fid *int64
		if r.FindingID > 0 {
			fid = &r.FindingID
		}
		var day *string
		if r.DigestDay != "" {
			day = &r.DigestDay
		}
		var payload any
		if r.Payload != nil {
			payload = r.Payload
		}
		if _, err := tx.Exec(ctx, `INSERT INTO outbox (channel, level, finding_id, digest_day, dedupe_key, subject, body, payload, recipients, next_attempt_at)
			VALUES ($1, $2, $3, $4::date, $5, $6, $7, $8, $9, $10) ON CONFLICT (dedupe_key) DO NOTHING`,
			r.Channel, int(r.Level), fid, day, r.DedupeKey, r.Subject, r.Body, payload, recips, now); err != nil {
			return fmt.Errorf("enqueue notification %s: %w", r.DedupeKey, err)
		}
	}
	return nil
}

// EnqueueNotifications writes notifications (e.g. a daily digest) into the
// outbox in one transaction.
func (d *DB) EnqueueNotifications(ctx context.Context, ns []halfmark.Notification) error {
	if len(ns) == 0 {
		return nil
	}
	return mapErr(d.tx(ctx, func(tx pgx.Tx) error { return insertNotifications(ctx, tx, ns, d.Now()) }))
}

// DigestFindings lists the Level 1 findings that are active now and were
// opened before before, by machine and age: the daily digest's content.
func (d *DB) DigestFindings(ctx context.Context, before time.Time) ([]halfmark.Finding, error) {
	rows, err := d.Pool.Query(ctx, `SELECT `+findingCols+findingFrom+`
		WHERE f.level = 1 AND f.state <> 'resolved' AND f.opened_at < $1 ORDER BY m.name, f.opened_at, f.id`, before)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Finding, error) { return scanFinding(r) })
	return out, mapErr(err)
}

var _ halfmark.FindingService = (*DB)(nil)
var _ halfmark.EvaluationService = (*DB)(nil)
var _ halfmark.EvaluationStore = (*DB)(nil)
