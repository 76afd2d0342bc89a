// Package tolerance reads the tolerance book: the local physicist's
// tolerance and action limits for every quantity Halfmark judges, the chart
// designs of the drift engine ([detection]) and the words shown with a
// Level 2 or 3 verdict ([entry]). The shipped example (example.toml, AAPM
// TG-142 values with local choices marked) is embedded in the binary.
package tolerance

import (
	"bytes"
	"crypto/sha256"
	_ "embed"
	"encoding/hex"
	"errors"
	"fmt"
	"math"
	"os"
	"strings"

	"github.com/BurntSushi/toml"

	"halfmark"
)

// Example is example.toml: the book in force when no --tolerances file is
// given.
//
//go:embed example.toml
var Example []byte

var bookQuantities = []halfmark.Quantity{halfmark.QPosition, halfmark.QPenumbra, halfmark.QLightOffset,
	halfmark.QFieldSize, halfmark.QCentreOffset, halfmark.QMLCLeaf, halfmark.QMLCBankMean}

// DefaultInstruction is the text shown with a Level 2 or 3 verdict when the
// book's [entry] table sets none (a local choice, stated as such).
const DefaultInstruction = "Repeat the measurement and inform physics before treating."

// Book is a tolerance book read from TOML (see example.toml for the
// format). It implements halfmark.ToleranceBook and is immutable once
// loaded.
type Book struct {
	entries     []toleranceEntry
	detection   map[string]any
	instruction string
	hash        string
	source      string
	shipped     bool
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

type entryTable struct {
	// LevelInstruction is shown, large, with a Level 2 or 3 verdict of a
	// morning entry.
	LevelInstruction string `toml:"level_instruction"`
}

type toleranceFile struct {
	Limit     []toleranceEntry `toml:"limit"`
	Detection map[string]any   `toml:"detection"`
	Entry     entryTable       `toml:"entry"`
}

// Shipped returns the example book embedded in the binary (in force when
// no --tolerances file is given).
func Shipped() *Book {
	t, err := Parse(Example, "shipped example (analysis/tolerance/example.toml)")
	if err != nil {
		panic("tolerance: the shipped example does not load: " + err.Error()) // a build defect, caught by the tests
	}
	t.shipped = true
	return t
}

// Load reads the book at path; an empty path gives the shipped
// example.
func Load(path string) (*Book, error) {
	if path == "" {
		return Shipped(), nil
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("tolerances: %w", err)
	}
	return Parse(data, path)
}

// Parse reads a book from TOML. Errors name the file and line
// and say what to fix. The hash is the hex SHA-256 of data.
func Parse(data []byte, source string) (*Book, error) {
	var f toleranceFile
	md, err := toml.Decode(string(data), &f)
	if err != nil {
		var pe toml.ParseError
		if errors.As(err, &pe) {
			return nil, fmt.Errorf("tolerances %s: line %d: %s", source, pe.Position.Line, pe.Message)
		}
		return nil, fmt.Errorf("tolerances %s: %v", source, err)
	}
	for _, k := range md.Undecoded() {
		if len(k) > 0 && k[0] == "detection" {
			continue // decoded by the drift engine (DecodeDetection)
		}
		return nil, fmt.Errorf("tolerances %s: unknown key %q; the keys of a [[limit]] are quantity, kind, jaws, edges, tolerance_mm, action_mm, source; [entry] has level_instruction; [detection] holds the chart designs", source, k.String())
	}
	lines := limitLines(data)
	if len(f.Limit) == 0 {
		return nil, fmt.Errorf("tolerances %s: no [[limit]] entries; see analysis/tolerance/example.toml", source)
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
	instr := strings.TrimSpace(f.Entry.LevelInstruction)
	if instr == "" {
		instr = DefaultInstruction
	}
	sum := sha256.Sum256(data)
	return &Book{entries: f.Limit, detection: f.Detection, instruction: instr, hash: hex.EncodeToString(sum[:]), source: source}, nil
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
func (t *Book) Limits(q halfmark.Quantity, kind halfmark.CheckKind, edge string, asymmetric bool) (halfmark.Limits, bool) {
	class := "jaws"
	if e, err := halfmark.ParseEdge(edge); err == nil && e.Jaw == "" {
		class = "mlc"
		if q == halfmark.QPosition {
			q = halfmark.QMLCLeaf
		}
	} else if q == halfmark.QMLCBankMean || q == halfmark.QMLCLeaf {
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
func (t *Book) Hash() string { return t.hash }

// Source implements halfmark.ToleranceBook.
func (t *Book) Source() string { return t.source }

// IsShippedExample implements halfmark.ToleranceBook.
func (t *Book) IsShippedExample() bool { return t.shipped }

// Instruction is the text shown with a Level 2 or 3 morning verdict.
func (t *Book) Instruction() string { return t.instruction }

// DecodeDetection decodes the book's [detection] table into v (a pointer to
// the drift engine's design struct, filled with its defaults first): keys
// the table leaves out keep their defaults; an unknown key is an error that
// names it.
func (t *Book) DecodeDetection(v any) error {
	if len(t.detection) == 0 {
		return nil
	}
	var buf bytes.Buffer
	if err := toml.NewEncoder(&buf).Encode(t.detection); err != nil {
		return fmt.Errorf("tolerances %s: [detection]: %v", t.source, err)
	}
	md, err := toml.Decode(buf.String(), v)
	if err != nil {
		return fmt.Errorf("tolerances %s: [detection]: %v", t.source, err)
	}
	if und := md.Undecoded(); len(und) > 0 {
		return fmt.Errorf("tolerances %s: [detection]: unknown key %q", t.source, und[0].String())
	}
	return nil
}

var _ halfmark.ToleranceBook = (*Book)(nil)
