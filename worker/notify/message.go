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

// alertSubject is "[Halfmark] Level 3 — immediate action: Linac A 6 MV X2".
func alertSubject(al halfmark.Alert) string {
	parts := []string{machineName(al), beamLabel(al)}
	if al.Edge != "" {
		parts = append(parts, al.Edge)
	}
	return "[Halfmark] " + al.Level.String() + ": " + strings.Join(parts, " ")
}

// alertBody is the plain-text e-mail for one alert: where, what, how far
// from baseline against the limits, which rule, how soon, and where to look.
func alertBody(al halfmark.Alert, cfg Config) string {
	loc := cfg.loc()
	var b strings.Builder
	fmt.Fprintf(&b, "%s on %s, beam %s", al.Level, machineName(al), beamLabel(al))
	if al.Edge != "" {
		fmt.Fprintf(&b, ", %s %s", edgeWord(al.Edge), al.Edge)
	}
	b.WriteString(".\n\n")
	row := func(k, v string) { fmt.Fprintf(&b, "%-20s %s\n", k+":", v) }
	row("Machine", machineName(al))
	row("Beam", beamLabel(al))
	if al.Edge != "" {
		row(capitalize(edgeWord(al.Edge)), al.Edge)
	} else {
		row("Edge", "none (beam-level alert)")
	}
	if al.Quantity != "" {
		row("Quantity", quantityLabel(al.Quantity))
	}
	if al.Geometry != "" {
		row("Setup", al.Geometry)
	}
	rule := al.Rule
	if al.Family != "" && al.Family != al.Rule {
		rule += " (" + al.Family + ")"
	}
	row("Rule", rule)
	row("From baseline", deviationText(al.DeviationMM, al.ToleranceMM, al.ActionMM))
	if al.ProjectedCrossing != nil {
		row("Projected crossing", al.ProjectedCrossing.In(loc).Format("2006-01-02"))
	}
	if !al.OpenedAt.IsZero() {
		row("Opened", al.OpenedAt.In(loc).Format("2006-01-02 15:04 MST"))
	}
	if al.State != "" {
		row("State", string(al.State))
	}
	if al.Message != "" {
		b.WriteString("\n")
		b.WriteString(al.Message)
		b.WriteString("\n")
	}
	b.WriteString("\n")
	b.WriteString(dashboardLine(cfg, "Open the alert", "/alerts/"+strconv.FormatInt(al.ID, 10)))
	b.WriteString("\n-- \n")
	b.WriteString(SafetyCaution)
	b.WriteString("\n")
	return b.String()
}

// digestSubject is "[Halfmark] Level 1 — inspection: daily digest 2026-12-02, 2 alerts".
func digestSubject(day string, n int) string {
	noun := "alerts"
	if n == 1 {
		noun = "alert"
	}
	return fmt.Sprintf("[Halfmark] %s: daily digest %s, %d %s", halfmark.LevelInspect, day, n, noun)
}

// digestBody lists the Level 1 alerts still open or acknowledged on day.
func digestBody(day string, alerts []halfmark.Alert, cfg Config) string {
	loc := cfg.loc()
	var b strings.Builder
	fmt.Fprintf(&b, "Daily digest for %s: %d %s at %s, open or acknowledged.\n", day, len(alerts), plural(len(alerts), "alert", "alerts"), halfmark.LevelInspect)
	b.WriteString("Level 1 signals are statistical or trend signals still inside tolerance: inspect, no action is required yet.\n\n")
	for i, al := range alerts {
		fmt.Fprintf(&b, "%d. %s, beam %s", i+1, machineName(al), beamLabel(al))
		if al.Edge != "" {
			fmt.Fprintf(&b, ", %s %s", edgeWord(al.Edge), al.Edge)
		}
		if al.Quantity != "" {
			fmt.Fprintf(&b, ", %s", quantityLabel(al.Quantity))
		}
		fmt.Fprintf(&b, "\n   Rule: %s\n", al.Rule)
		fmt.Fprintf(&b, "   From baseline: %s\n", deviationText(al.DeviationMM, al.ToleranceMM, al.ActionMM))
		if al.ProjectedCrossing != nil {
			fmt.Fprintf(&b, "   Projected crossing: %s\n", al.ProjectedCrossing.In(loc).Format("2006-01-02"))
		}
		fmt.Fprintf(&b, "   Opened %s, %s (alert %d)\n", al.OpenedAt.In(loc).Format("2006-01-02 15:04 MST"), al.State, al.ID)
		if al.Message != "" {
			fmt.Fprintf(&b, "   %s\n", al.Message)
		}
		if cfg.DashboardURL != "" {
			fmt.Fprintf(&b, "   %s/alerts/%d\n", cfg.DashboardURL, al.ID)
		}
		b.WriteString("\n")
	}
	b.WriteString(dashboardLine(cfg, "All alerts", "/alerts"))
	b.WriteString("\n-- \n")
	b.WriteString(SafetyCaution)
	b.WriteString("\n")
	return b.String()
}

func dashboardLine(cfg Config, what, path string) string {
	if cfg.DashboardURL == "" {
		return what + ": open the Halfmark dashboard (no dashboard URL is configured).\n"
	}
	return what + ": " + strings.TrimRight(cfg.DashboardURL, "/") + path + "\n"
}

// deviationText is "+2.40 mm (tolerance ±1.00 mm, action limit ±2.00 mm)".
func deviationText(dev, tol, action *float64) string {
	s := "not available"
	if dev != nil {
		s = strconv.FormatFloat(*dev, 'f', 2, 64) + " mm"
		if *dev >= 0 {
			s = "+" + s
		}
	}
	var lim []string
	if tol != nil {
		lim = append(lim, "tolerance ±"+strconv.FormatFloat(*tol, 'f', 2, 64)+" mm")
	}
	if action != nil {
		lim = append(lim, "action limit ±"+strconv.FormatFloat(*action, 'f', 2, 64)+" mm")
	}
	if len(lim) > 0 {
		s += " (" + strings.Join(lim, ", ") + ")"
	}
	return s
}

func machineName(al halfmark.Alert) string {
	if al.MachineName != "" {
		return al.MachineName
	}
	return "machine " + strconv.FormatInt(al.MachineID, 10)
}

func beamLabel(al halfmark.Alert) string {
	if al.BeamLabel != "" {
		return al.BeamLabel
	}
	return "beam " + strconv.FormatInt(al.BeamID, 10)
}

// edgeWord is "edges" for a pair such as "X1+X2", else "edge".
func edgeWord(edge string) string {
	if strings.Contains(edge, "+") {
		return "edges"
	}
	return "edge"
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

func capitalize(s string) string {
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
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
