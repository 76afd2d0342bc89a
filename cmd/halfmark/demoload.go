package main

import (
	"context"
	"fmt"
	"io"
	"time"

	"halfmark"
	"halfmark/analysis/rawdata"
	"halfmark/deploy/demo"
)

// loadDemo stores the invented clinic ending on end, showing progress on w:
// machines and beams, every check in time order (raw files analysed by the
// engine as they would be on upload), Heron's service event, commissioning
// baselines and the demo users.
func loadDemo(ctx context.Context, st *store, end time.Time, w io.Writer) error {
	a := halfmark.Actor{Name: "demo loader", Role: halfmark.RoleAdmin}
	gen := demo.New(end)
	machines := demo.Machines()
	fmt.Fprintf(w, "demo: generating %s — %d linacs, %d years of checks ending %s (seed %d)\n",
		demo.Clinic, len(machines), gen.Years, gen.End.Format("2006-01-02"), demo.Seed)
	for mi, m := range machines {
		mm := m.Machine
		if err := st.CreateMachine(ctx, a, &mm); err != nil {
			return err
		}
		var beamIDs []int64
		for _, b := range m.Beams {
			bb := halfmark.Beam{MachineID: mm.ID, EnergyMV: b.EnergyMV, FFF: b.FFF}
			if err := st.CreateBeam(ctx, a, &bb); err != nil {
				return err
			}
			beamIDs = append(beamIDs, bb.ID)
		}
		items := gen.Items(m, mm.ID, beamIDs)
		now := time.Now()
		for len(items) > 0 && itemTime(items[len(items)-1]).After(now) { // today's later checks have not happened yet
			items = items[:len(items)-1]
		}
		var batch []halfmark.Check
		flush := func() error {
			if len(batch) == 0 {
				return nil
			}
			_, err := st.RecordBatch(ctx, a, batch)
			batch = batch[:0]
			return err
		}
		start := time.Now()
		for i, it := range items {
			switch {
			case it.Event != nil:
				if err := flush(); err != nil {
					return err
				}
				ev := *it.Event
				if err := st.CreateServiceEvent(ctx, a, &ev); err != nil {
					return err
				}
			case it.Raw != nil:
				if err := flush(); err != nil {
					return err
				}
				if err := storeRaw(ctx, st, a, it); err != nil {
					return fmt.Errorf("%s %s %s: %w", mm.Name, it.Raw.Filename, it.Check.MeasuredAt.Format(time.DateOnly), err)
				}
			default:
				batch = append(batch, it.Check)
				if len(batch) == 500 {
					if err := flush(); err != nil {
						return err
					}
				}
			}
			if i%200 == 0 || i == len(items)-1 {
				fmt.Fprintf(w, "\rdemo: %-6s %s %5d/%d records (%.0f%%)", mm.Name, bar(i+1, len(items)), i+1, len(items), 100*float64(i+1)/float64(len(items)))
			}
		}
		if err := flush(); err != nil {
			return err
		}
		fmt.Fprintf(w, "  %.1f s — %s\n", time.Since(start).Seconds(), m.Story)
		if err := commissioningBaselines(ctx, st, a, mm.ID, gen.Start()); err != nil {
			return err
		}
		_ = mi
	}
	for _, p := range demo.Staff {
		if _, err := st.CreateUser(ctx, a, p.Email, p.Role, p.Password); err != nil {
			return err
		}
	}
	return nil
}

// storeRaw analyses a raw file with the engine and stores the check with
// (or, for older months, without) the file.
func storeRaw(ctx context.Context, st *store, a halfmark.Actor, it demo.Item) error {
	analysis, edges, err := rawdata.Analyze(it.Raw.Kind, it.Raw.Data, it.Raw.Options)
	if err != nil {
		return err
	}
	c := it.Check
	c.Edges = edges
	c.AnalysisVersion = rawdata.Version
	if !it.Raw.Keep {
		_, _, err := st.RecordCheck(ctx, a, &c)
		return err
	}
	r := halfmark.RawData{Kind: it.Raw.Kind, Filename: it.Raw.Filename, Content: it.Raw.Data, Options: it.Raw.Options,
		Analysis: analysis, AnalysisVersion: rawdata.Version}
	_, _, err = st.RecordCheckWithRaw(ctx, a, &c, &r)
	return err
}

// commissioningBaselines sets, for every position and penumbra series of a
// machine with commissioning points, their mean as the baseline in force
// from the commissioning day, with the σ of the commissioning
// repeatability study.
func commissioningBaselines(ctx context.Context, st *store, a halfmark.Actor, machineID int64, from time.Time) error {
	ss, err := st.MachineSeries(ctx, machineID)
	if err != nil {
		return err
	}
	for _, s := range ss {
		if s.Quantity == halfmark.QLightOffset {
			continue
		}
		pts, err := st.Points(ctx, s.ID)
		if err != nil {
			return err
		}
		sum, n := 0.0, 0
		var at time.Time
		for _, p := range pts {
			if p.Kind == halfmark.KindCommissioning {
				sum, n, at = sum+p.Value, n+1, p.MeasuredAt
			}
		}
		if n == 0 {
			continue
		}
		v := sum / float64(n)
		sd := demo.ReproducibilityMM(s.Quantity, s.Edge, s.Geometry)
		b := halfmark.Baseline{SeriesID: s.ID, ValueMM: &v, SigmaMM: &sd, ValidFrom: from,
			Reason: fmt.Sprintf("commissioning %s: mean of %d measurement(s); σ from the commissioning repeatability study", at.Format(time.DateOnly), n)}
		if err := st.SetBaseline(ctx, a, &b); err != nil {
			return err
		}
	}
	return nil
}

func bar(n, total int) string {
	const width = 24
	k := width * n / max(total, 1)
	b := make([]byte, width)
	for i := range b {
		b[i] = '.'
		if i < k {
			b[i] = '#'
		}
	}
	return "[" + string(b) + "]"
}

func itemTime(it demo.Item) time.Time {
	if it.Event != nil {
		return it.Event.At
	}
	return it.Check.MeasuredAt
}
