package notify

import (
	"fmt"
	"net/mail"
	"net/url"
	"strconv"
	"strings"
	"time"

	"halfmark"
)

// SafetyCaution ends every e-mail.
const SafetyCaution = "Halfmark's results support, and never replace, the judgement of a qualified medical physicist; tolerances are set locally."

// findingSubject is "[Halfmark] Level 2 — scheduled action: Heron MLC bank 2".
func findingSubject(f halfmark.Finding) string {
	return "[Halfmark] " + f.Level.String() + ": " + machineName(f) + " " + f.Component.Label()
}

// levelMeaning is what a level asks of the physicist, after the three
// action levels of AAPM TG-142 (E. E. Klein et al., "Task Group 142 report:
// Quality assurance of medical accelerators", Med Phys 36:4197–4212, 2009):
// inspection, scheduled action (within one or two working days), immediate
// action (stop treatment). Tolerance and action limits are set locally.
func levelMeaning(l halfmark.Level) string {
	switch l {
	case halfmark.LevelInspect:
		return "a signal still inside tolerance: inspect; no correction is required yet"
	case halfmark.LevelScheduled:
		return "beyond tolerance: schedule a correction within one or two working days"
	case halfmark.LevelImmediate:
		return "beyond the action limit: immediate action; stop treating with the affected function until it is corrected"
	}
	return "in control"
}

// findingBody is the plain-text e-mail for one finding: which machine and
// component, how serious, how large (with its 95% interval), since when,
// when it crosses its limits, which series show it, where to look, and the
// safety caution.
func findingBody(f halfmark.Finding, cfg Config) string {
	loc := cfg.loc()
	var b strings.Builder
	fmt.Fprintf(&b, "%s on %s: %s.\n\n", f.Level, machineName(f), f.Component.Label())
	row := func(k, v string) { fmt.Fprintf(&b, "%-12s %s\n", k+":", v) }
	row("Machine", machineName(f))
	row("Component", f.Component.Label())
	row("Level", f.Level.String()+" ("+levelMeaning(f.Level)+")")
	row("Magnitude", magnitudeText(f))
	row("Onset", onsetText(f.Onset, loc))
	row("Crossing", crossingText(f.Crossing, loc))
	if f.State != "" {
		row("State", string(f.State))
	}
	if !f.OpenedAt.IsZero() {
		row("Opened", f.OpenedAt.In(loc).Format("2006-01-02 15:04 MST"))
	}
	if f.Message != "" {
		b.WriteString("\n")
		b.WriteString(f.Message)
		b.WriteString("\n")
	}
	b.WriteString("\n")
	writeEvidence(&b, f.Evidence, "")
	b.WriteString("\n")
	b.WriteString(dashboardLine(cfg, "Open the finding", findingPath(f.ID)))
	if f.MachineID > 0 {
		b.WriteString(dashboardLine(cfg, "Open the machine", "/machines/"+strconv.FormatInt(f.MachineID, 10)))
	}
	b.WriteString("\n-- \n")
	b.WriteString(SafetyCaution)
	b.WriteString("\n")
	return b.String()
}

// writeEvidence lists the series behind a finding, one per line.
func writeEvidence(b *strings.Builder, ev []halfmark.Evidence, indent string) {
	if len(ev) == 0 {
		b.WriteString(indent + "Evidence: no series listed.\n")
		return
	}
	fmt.Fprintf(b, "%sEvidence (%d %s):\n", indent, len(ev), plural(len(ev), "series", "series"))
	for _, e := range ev {
		var parts []string
		add := func(k, v string) {
			if v != "" {
				parts = append(parts, k+" "+v)
			}
		}
		add("beam", e.Beam)
		add("setup", e.Geometry)
		add("method", string(e.Method))
		add("edge", e.Edge)
		if e.Quantity != "" {
			parts = append(parts, quantityLabel(e.Quantity))
		}
		line := fmt.Sprintf("%s- series %d: %s", indent, e.SeriesID, strings.Join(parts, ", "))
		rules := "none named"
		if len(e.Rules) > 0 {
			rules = strings.Join(e.Rules, ", ")
		}
		line += "; rules " + rules
		if e.DeviationMM != nil {
			line += "; " + signedMM(*e.DeviationMM) + " from baseline"
		}
		b.WriteString(line + "\n")
	}
}

// digestSubject is "[Halfmark] Level 1 — inspection: daily digest 2026-12-02, 2 findings".
func digestSubject(day string, n int) string {
	return fmt.Sprintf("[Halfmark] %s: daily digest %s, %d %s", halfmark.LevelInspect, day, n, plural(n, "finding", "findings"))
}

// digestBody lists the Level 1 findings still active on day, each with a
// link to its page, and ends with a link to the findings list.
func digestBody(day string, fs []halfmark.Finding, cfg Config) string {
	loc := cfg.loc()
	var b strings.Builder
	fmt.Fprintf(&b, "Daily digest for %s: %d %s at %s, open or acknowledged.\n", day, len(fs), plural(len(fs), "finding", "findings"), halfmark.LevelInspect)
	b.WriteString("Level 1 findings are " + levelMeaning(halfmark.LevelInspect) + ".\n\n")
	for i, f := range fs {
		fmt.Fprintf(&b, "%d. %s, %s (finding %d, %s)\n", i+1, machineName(f), f.Component.Label(), f.ID, f.State)
		fmt.Fprintf(&b, "   Magnitude: %s\n", magnitudeText(f))
		fmt.Fprintf(&b, "   Onset: %s\n", onsetText(f.Onset, loc))
		fmt.Fprintf(&b, "   Crossing: %s\n", crossingText(f.Crossing, loc))
		if !f.OpenedAt.IsZero() {
			fmt.Fprintf(&b, "   Opened: %s\n", f.OpenedAt.In(loc).Format("2006-01-02 15:04 MST"))
		}
		if f.Message != "" {
			fmt.Fprintf(&b, "   %s\n", f.Message)
		}
		writeEvidence(&b, f.Evidence, "   ")
		if cfg.DashboardURL != "" {
			fmt.Fprintf(&b, "   %s%s\n", strings.TrimRight(cfg.DashboardURL, "/"), findingPath(f.ID))
		}
		b.WriteString("\n")
	}
	b.WriteString(dashboardLine(cfg, "All findings", "/findings"))
	b.WriteString("\n-- \n")
	b.WriteString(SafetyCaution)
	b.WriteString("\n")
	return b.String()
}

// findingPath is the dashboard page of a finding, "/findings/42".
func findingPath(id int64) string { return "/findings/" + strconv.FormatInt(id, 10) }

func dashboardLine(cfg Config, what, path string) string {
	if cfg.DashboardURL == "" {
		return what + ": open the Halfmark dashboard (no dashboard URL is configured).\n"
	}
	return what + ": " + strings.TrimRight(cfg.DashboardURL, "/") + path + "\n"
}

// magnitudeText is "+0.90 mm outward (95% interval +0.72 to +1.08 mm)";
// positive is outward, or wider for a penumbra (the edge convention).
func magnitudeText(f halfmark.Finding) string {
	s := signedMM(f.MagnitudeMM)
	out, in := "outward", "inward"
	if f.Kind == halfmark.ComponentPenumbra {
		out, in = "wider", "narrower"
	}
	switch {
	case f.MagnitudeMM > 0:
		s += " " + out
	case f.MagnitudeMM < 0:
		s += " " + in
	}
	lo, hi := f.MagnitudeCIMM[0], f.MagnitudeCIMM[1]
	if lo != 0 || hi != 0 {
		s += " (95% interval " + signedNum(lo) + " to " + signedNum(hi) + " mm)"
	}
	return s
}

func onsetText(t *time.Time, loc *time.Location) string {
	if t == nil {
		return "not estimated"
	}
	return t.In(loc).Format(time.DateOnly)
}

// crossingText states the crossing status; a date appears only for a
// projected crossing.
func crossingText(c halfmark.FindingCrossing, loc *time.Location) string {
	switch c.Status {
	case halfmark.CrossingAlreadyBeyond:
		return "already beyond tolerance"
	case halfmark.CrossingNotSignificant:
		return "no significant trend since the onset"
	case halfmark.CrossingBeyondHorizon:
		return "the trend reaches tolerance only beyond the projection horizon"
	case halfmark.CrossingProjected:
		if c.ToleranceDate == nil {
			return "projected (no date given)"
		}
		s := "projected to reach tolerance on " + c.ToleranceDate.In(loc).Format(time.DateOnly)
		lo, hi := c.ToleranceInterval[0], c.ToleranceInterval[1]
		if lo != nil || hi != nil {
			s += " (95% interval " + dateOr(lo, loc, "open") + " to " + dateOr(hi, loc, "open") + ")"
		}
		if c.ActionDate != nil {
			s += ", the action limit on " + c.ActionDate.In(loc).Format(time.DateOnly)
		}
		return s
	case "":
		return "not stated"
	}
	return c.Status
}

func dateOr(t *time.Time, loc *time.Location, none string) string {
	if t == nil {
		return none
	}
	return t.In(loc).Format(time.DateOnly)
}

// signedMM is "+0.90 mm" / "-0.35 mm".
func signedMM(v float64) string { return signedNum(v) + " mm" }

func signedNum(v float64) string {
	s := strconv.FormatFloat(v, 'f', 2, 64)
	if v >= 0 {
		s = "+" + s
	}
	return s
}

func machineName(f halfmark.Finding) string {
	if f.Machine != "" {
		return f.Machine
	}
	return "machine " + strconv.FormatInt(f.MachineID, 10)
}

func quantityLabel(q halfmark.Quantity) string {
	switch q {
	case halfmark.QPosition:
		return "50% edge position (isocentre plane)"
	case halfmark.QPenumbra:
		return "80–20 penumbra"
	case halfmark.QLightOffset:
		return "light–radiation edge offset"
	}
	return string(q)
}

func plural(n int, one, many string) string {
	if n == 1 {
		return one
	}
	return many
}

// messageID is a stable RFC 5322 §3.6.4 msg-id (without the angle
// brackets) derived from the dedupe key, so that a message sent twice after
// a crash carries the same Message-ID and a receiving system can drop the
// copy. The right-hand side names this installation: the dashboard's host,
// else the sender's domain.
func messageID(dedupeKey string, cfg Config) string {
	left := strings.Map(func(r rune) rune {
		if r < 128 && (r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || strings.ContainsRune("!#$%&'*+-/=?^_`{|}~", r)) {
			return r
		}
		return '.'
	}, dedupeKey)
	left = strings.Trim(left, ".")
	for strings.Contains(left, "..") {
		left = strings.ReplaceAll(left, "..", ".")
	}
	return "halfmark." + left + "@" + installationDomain(cfg)
}

func installationDomain(cfg Config) string {
	if u, err := url.Parse(cfg.DashboardURL); err == nil && u.Hostname() != "" && !strings.Contains(u.Hostname(), ":") {
		return u.Hostname()
	}
	if a, err := mail.ParseAddress(cfg.From); err == nil {
		if i := strings.LastIndexByte(a.Address, '@'); i >= 0 && i+1 < len(a.Address) {
			return a.Address[i+1:]
		}
	}
	return "halfmark.invalid"
}

// dayString is the calendar date of t in loc, "2006-01-02".
func dayString(t time.Time, loc *time.Location) string { return t.In(loc).Format(time.DateOnly) }
