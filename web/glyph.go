package web

import (
	"html/template"
	"strings"

	"halfmark"
)

// Level marks. Each level has its own shape as well as its own colour, so
// that it reads without colour: a "level meter" of three bars, of which the
// level fills as many (Level 1: one bar, Level 3: all three), an open ring
// for in control and an hourglass for an overdue check. The shapes are
// drawn in currentColor; the colours come from the stylesheet.
var glyphs = map[string]template.HTML{
	"lv0":     `<svg class="glyph" viewBox="0 0 16 16" aria-hidden="true"><circle cx="8" cy="8" r="5.5" fill="none" stroke="currentColor" stroke-width="2"/></svg>`,
	"lv1":     meter(1),
	"lv2":     meter(2),
	"lv3":     meter(3),
	"overdue": `<svg class="glyph" viewBox="0 0 16 16" aria-hidden="true"><path d="M3 1.5h10L8 8l5 6.5H3L8 8z" fill="none" stroke="currentColor" stroke-width="1.6" stroke-linejoin="round"/><path d="M5.5 13.5h5L8 10.5z" fill="currentColor"/></svg>`,
}

func meter(n int) template.HTML {
	s := `<svg class="glyph" viewBox="0 0 16 16" aria-hidden="true">`
	ys := []string{"11.5", "6.75", "2"}
	for i, y := range ys {
		if i < n {
			s += `<rect x="1.5" y="` + y + `" width="13" height="3" rx="0.5" fill="currentColor"/>`
		} else {
			s += `<rect x="2" y="` + y + `" width="12" height="2.5" rx="0.5" fill="none" stroke="currentColor" stroke-width="0.8" stroke-dasharray="1.5 1" opacity="0.55"/>`
		}
	}
	return template.HTML(s + `</svg>`)
}

// levelKey is the CSS class and glyph name for a level, or "overdue" for
// an in-control machine whose check is overdue.
func levelKey(l halfmark.Level, overdue bool) string {
	switch {
	case l >= halfmark.LevelImmediate:
		return "lv3"
	case l == halfmark.LevelScheduled:
		return "lv2"
	case l == halfmark.LevelInspect:
		return "lv1"
	case overdue:
		return "overdue"
	}
	return "lv0"
}

// glyphSymbols defines every glyph once per page as an SVG symbol; each
// badge then refers to its symbol with <use>, which keeps long tables small.
var glyphSymbols = func() template.HTML {
	s := `<svg class="symbols" aria-hidden="true" width="0" height="0">`
	for _, k := range []string{"lv0", "lv1", "lv2", "lv3", "overdue"} {
		g := string(glyphs[k])
		inner := g[strings.Index(g, ">")+1 : strings.LastIndex(g, "</svg>")]
		s += `<symbol id="g-` + k + `" viewBox="0 0 16 16">` + inner + `</symbol>`
	}
	return template.HTML(s + `</svg>`)
}()

func levelCSS(l halfmark.Level, overdue bool) string { return levelKey(l, overdue) }

// levelText names a level; an overdue check is named beside any level.
func levelText(l halfmark.Level, overdue bool) string {
	t := "In control"
	if l != halfmark.LevelInControl {
		t = l.String()
	}
	switch {
	case overdue && l == halfmark.LevelInControl:
		return "Check overdue"
	case overdue:
		return t + " · check overdue"
	}
	return t
}

// glyph is the level's shape followed by its name, as one badge. An
// overdue check gets its own badge beside any level: a machine at Level 1
// whose morning check is missing shows both, as the README says.
func glyph(l halfmark.Level, overdue bool) template.HTML {
	k := levelKey(l, overdue)
	text := levelText(l, false)
	if k == "overdue" {
		text = levelText(l, true)
	}
	out := template.HTML(`<span class="level `+k+`">`) + glyphs[k] +
		template.HTML(`<span class="level-text">`+template.HTMLEscapeString(text)+`</span></span>`)
	if overdue && k != "overdue" {
		out += template.HTML(` <span class="level overdue">`) + glyphs["overdue"] +
			template.HTML(`<span class="level-text">Check overdue</span></span>`)
	}
	return out
}

// engineVerdictText is the engine's verdict word for people.
func engineVerdictText(v string, l halfmark.Level) string {
	switch v {
	case halfmark.VerdictInControl:
		return "in control"
	case halfmark.VerdictWithinTolerance:
		return "within tolerance (control-chart tests not run)"
	case halfmark.VerdictBaselinePending:
		return "baseline pending"
	case halfmark.VerdictSignal:
		return strings.ToLower(l.String()[:1]) + l.String()[1:]
	case "", halfmark.VerdictNotEvaluated:
		return "not evaluated yet"
	}
	return v
}
