package worker

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"os"
	"strings"

	"github.com/BurntSushi/toml"

	"halfmark"
	"halfmark/deploy"
)

// Quantities a tolerance book may set beyond the per-edge ones
// (halfmark.QPosition, QPenumbra, QLightOffset).
const (
	QFieldSize    halfmark.Quantity = "field_size"    // X1 + X2 (or Y1 + Y2), mm
	QCentreOffset halfmark.Quantity = "centre_offset" // (X2 − X1)/2, mm
	QMLCLeaf      halfmark.Quantity = "mlc_leaf"      // one MLC leaf end position, mm
	QMLCBankMean  halfmark.Quantity = "mlc_bank_mean" // mean deviation of a bank's leaf ends, mm
)

var bookQuantities = []halfmark.Quantity{halfmark.QPosition, halfmark.QPenumbra, halfmark.QLightOffset,
	QFieldSize, QCentreOffset, QMLCLeaf, QMLCBankMean}

// Tolerances is a tolerance book read from TOML (see
// deploy/tolerances.example.toml for the format). It implements
// halfmark.ToleranceBook and is immutable once loaded.
type Tolerances struct {
	entries []toleranceEntry
	hash    string
	source  string
	shipped bool
}

type toleranceEntry struct {
	Quantity    string   `toml:"quantity"`
	Kind        string   `toml:"kind"`
	Jaws        string   `toml:"jaws"`
	Edges       string   `toml:"edges"`
	ToleranceMM *float64 `toml:"tolerance_mm"`
	ActionMM    *float64 `toml:"action_mm"`
	Source      string   `toml:"source"`
	line        int
}

type toleranceFile struct {
	Limit []toleranceEntry `toml:"limit"`
}

// ShippedTolerances returns the example book embedded in the binary (in
// force when no --tolerances file is given).
func ShippedTolerances() *Tolerances {
	t, err := ParseTolerances(deploy.TolerancesExample, "shipped example (deploy/tolerances.example.toml)")
	if err != nil {
		panic("worker: the shipped tolerance example does not load: " + err.Error()) // a build defect, caught by the tests
	}
	t.shipped = true
	return t
}

// LoadTolerances reads the book at path; an empty path gives the shipped
// example.
func LoadTolerances(path string) (*Tolerances, error) {
	if path == "" {
		return ShippedTolerances(), nil
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("tolerances: %w", err)
	}
	return ParseTolerances(data, path)
}

// ParseTolerances reads a book from TOML. Errors name the file and line
// and say what to fix. The hash is the hex SHA-256 of data.
func ParseTolerances(data []byte, source string) (*Tolerances, error) {
	var f toleranceFile
	md, err := toml.Decode(string(data), &f)
	if err != nil {
		var pe toml.ParseError
		if errors.As(err, &pe) {
			return nil, fmt.Errorf("tolerances %s: line %d: %s", source, pe.Position.Line, pe.Message)
		}
		return nil, fmt.Errorf("tolerances %s: %v", source, err)
	}
	if und := md.Undecoded(); len(und) > 0 {
		return nil, fmt.Errorf("tolerances %s: unknown key %q; the keys of a [[limit]] are quantity, kind, jaws, edges, tolerance_mm, action_mm, source", source, und[0].String())
	}
	lines := limitLines(data)
	if len(f.Limit) == 0 {
		return nil, fmt.Errorf("tolerances %s: no [[limit]] entries; see deploy/tolerances.example.toml", source)
	}
	seen := map[string]int{}
	for i := range f.Limit {
		e := &f.Limit[i]
		if i < len(lines) {
			e.line = lines[i]
		}
		if err := e.validate(); err != nil {
			return nil, fmt.Errorf("tolerances %s: line %d: %v", source, e.line, err)
		}
		key := e.Quantity + "|" + e.Kind + "|" + e.Jaws + "|" + e.Edges
		if prev, dup := seen[key]; dup {
			return nil, fmt.Errorf("tolerances %s: line %d: repeats the entry of line %d (same quantity, kind, jaws and edges); keep one", source, e.line, prev)
		}
		seen[key] = e.line
	}
	sum := sha256.Sum256(data)
	return &Tolerances{entries: f.Limit, hash: hex.EncodeToString(sum[:]), source: source}, nil
}

// limitLines returns the 1-based line of each [[limit]] header.
func limitLines(data []byte) []int {
	var out []int
	for i, l := range bytes.Split(data, []byte("\n")) {
		s := strings.TrimSpace(string(l))
		if strings.HasPrefix(s, "[[") && strings.Trim(strings.TrimSpace(strings.Trim(s, "[]")), " ") == "limit" {
			out = append(out, i+1)
		}
	}
	return out
}

func (e *toleranceEntry) validate() error {
	q := halfmark.Quantity(e.Quantity)
	okQ := false
	for _, v := range bookQuantities {
		okQ = okQ || v == q
	}
	if !okQ {
		return fmt.Errorf("quantity %q unknown; use position, penumbra, light_offset, field_size, centre_offset, mlc_leaf or mlc_bank_mean", e.Quantity)
	}
	if e.Kind == "" {
		return errors.New(`kind is missing; give a check kind (morning, monthly, annual, commissioning, post-service) or "default"`)
	}
	if e.Kind != "default" && !halfmark.CheckKind(e.Kind).Valid() {
		return fmt.Errorf(`kind %q unknown; use morning, monthly, annual, commissioning, post-service or "default"`, e.Kind)
	}
	switch e.Jaws {
	case "":
		e.Jaws = "any"
	case "any", "symmetric", "asymmetric":
	default:
		return fmt.Errorf("jaws %q unknown; use symmetric, asymmetric or any", e.Jaws)
	}
	switch e.Edges {
	case "":
		e.Edges = "any"
	case "any", "jaws", "mlc":
	default:
		return fmt.Errorf("edges %q unknown; use jaws, mlc or any", e.Edges)
	}
	if e.ToleranceMM == nil || e.ActionMM == nil {
		return errors.New("tolerance_mm and action_mm are both required (mm)")
	}
	t, a := *e.ToleranceMM, *e.ActionMM
	if !(t > 0) || math.IsInf(t, 0) || t > 50 {
		return fmt.Errorf("tolerance_mm = %v must be a positive number of mm below 50", t)
	}
	if !(a >= t) || math.IsInf(a, 0) || a > 50 {
		return fmt.Errorf("action_mm = %v must be at least tolerance_mm (%v) and below 50 mm", a, t)
	}
	if strings.TrimSpace(e.Source) == "" {
		return errors.New(`source is missing; say where the value comes from, e.g. "AAPM TG-142 Table III" or "local choice"`)
	}
	return nil
}

// Limits implements halfmark.ToleranceBook. A position of an MLC edge
// (B1P23) is looked up as mlc_leaf. The most specific entry wins: exact
// kind over "default", then exact jaw setting over "any", then exact edge
// class over "any".
func (t *Tolerances) Limits(q halfmark.Quantity, kind halfmark.CheckKind, edge string, asymmetric bool) (halfmark.Limits, bool) {
	class := "jaws"
	if e, err := halfmark.ParseEdge(edge); err == nil && e.Jaw == "" {
		class = "mlc"
		if q == halfmark.QPosition {
			q = QMLCLeaf
		}
	} else if q == QMLCBankMean || q == QMLCLeaf {
		class = "mlc"
	}
	jaws := "symmetric"
	if asymmetric {
		jaws = "asymmetric"
	}
	best, bestScore := -1, -1
	for i, e := range t.entries {
		if e.Quantity != string(q) || (e.Kind != "default" && e.Kind != string(kind)) ||
			(e.Jaws != "any" && e.Jaws != jaws) || (e.Edges != "any" && e.Edges != class) {
			continue
		}
		score := 0
		if e.Kind != "default" {
			score += 4
		}
		if e.Jaws != "any" {
			score += 2
		}
		if e.Edges != "any" {
			score++
		}
		if score > bestScore {
			best, bestScore = i, score
		}
	}
	if best < 0 {
		return halfmark.Limits{}, false
	}
	e := t.entries[best]
	return halfmark.Limits{ToleranceMM: *e.ToleranceMM, ActionMM: *e.ActionMM, Source: e.Source}, true
}

// Hash implements halfmark.ToleranceBook.
func (t *Tolerances) Hash() string { return t.hash }

// Source implements halfmark.ToleranceBook.
func (t *Tolerances) Source() string { return t.source }

// IsShippedExample implements halfmark.ToleranceBook.
func (t *Tolerances) IsShippedExample() bool { return t.shipped }

var _ halfmark.ToleranceBook = (*Tolerances)(nil)
