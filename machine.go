package halfmark

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
	"unicode"

	"golang.org/x/text/cases"
	"golang.org/x/text/unicode/norm"
)

// Machine is one linear accelerator.
type Machine struct {
	ID           int64     `json:"id"`
	Name         string    `json:"name"`
	SADcm        float64   `json:"sad_cm"` // source-to-axis distance, cm (commonly 100)
	Model        string    `json:"model"`
	Serial       string    `json:"serial"`
	MLCLeafPairs int       `json:"mlc_leaf_pairs"` // 0 when the machine has no MLC
	MLCLayout    string    `json:"mlc_layout"`     // leaf-width layout name or spec, e.g. "60" or "10x10,40x5,10x10"
	Clinical     bool      `json:"clinical"`       // in clinical use
	CreatedAt    time.Time `json:"created_at"`

	Collimators *Collimators `json:"collimators"` // collimator geometry; nil until recorded
}

// Validate checks a machine before it is stored and normalises its name
// (Unicode NFKC, trimmed) and layout (trimmed).
func (m *Machine) Validate() error {
	var f Fields
	m.Name = strings.TrimSpace(norm.NFKC.String(m.Name))
	checkLine(&f, "name", m.Name, 1, 80)
	for _, r := range m.Name {
		if unicode.In(r, unicode.Cf, unicode.Co, unicode.Cs) || unicode.IsSpace(r) && r != ' ' {
			f.Add("name", "contains an invisible or formatting character (U+%04X); type the name with letters, digits, spaces and punctuation only", r)
			break
		}
	}
	checkLine(&f, "model", m.Model, 0, 200)
	checkLine(&f, "serial", m.Serial, 0, 200)
	m.MLCLayout = strings.TrimSpace(m.MLCLayout)
	checkLine(&f, "mlc_layout", m.MLCLayout, 0, 200)
	if m.SADcm == 0 {
		m.SADcm = 100
	}
	if !finite(m.SADcm) || m.SADcm < 50 || m.SADcm > 200 {
		f.Add("sad_cm", "must be between 50 and 200 cm (got %v); most linacs have SAD 100 cm", m.SADcm)
	}
	if m.MLCLeafPairs < 0 || m.MLCLeafPairs > 200 {
		f.Add("mlc_leaf_pairs", "must be between 0 and 200 (got %d)", m.MLCLeafPairs)
	}
	if m.MLCLayout != "" {
		switch pairs, err := MLCLayoutPairs(m.MLCLayout); {
		case err != nil:
			f.Add("mlc_layout", "%s", err.Error())
		case m.MLCLeafPairs == 0:
			f.Add("mlc_layout", "is given but mlc_leaf_pairs is 0; give the number of leaf pairs, or no layout for a machine without MLC")
		case pairs != m.MLCLeafPairs:
			f.Add("mlc_layout", "%q describes %d leaf pairs but mlc_leaf_pairs is %d; make them agree", m.MLCLayout, pairs, m.MLCLeafPairs)
		}
	}
	if m.Collimators != nil {
		m.Collimators.validate(&f, m.SADcm, m.MLCLeafPairs > 0)
	}
	return f.Err("the machine is not valid")
}

// MachineNameKey is what two machine names must not share: the name after
// Unicode NFKC normalisation and full case folding, so "TERN", "Tern" and a
// full-width "Ｔｅｒｎ" are one name. Unicode Standard Annex #15
// (normalization forms); Unicode Standard §5.18 (case folding).
func MachineNameKey(name string) string {
	return cases.Fold().String(norm.NFKC.String(strings.TrimSpace(name)))
}

// MLCLayoutPairs returns the number of leaf pairs of an MLC layout: one of
// the known names "60" (10×10 mm, 40×5 mm, 10×10 mm) and "80" (80×5 mm), or
// a spec of comma-separated COUNTxWIDTH groups from the Y2 side, e.g.
// "10x10,40x5,10x10" (count 1–200, width in mm above 0 and at most 100).
func MLCLayoutPairs(layout string) (int, error) {
	switch strings.TrimSpace(layout) {
	case "60":
		return 60, nil
	case "80":
		return 80, nil
	}
	total := 0
	for _, g := range strings.Split(layout, ",") {
		cs, ws, ok := strings.Cut(strings.ToLower(strings.TrimSpace(g)), "x")
		n, nerr := strconv.Atoi(strings.TrimSpace(cs))
		w, werr := strconv.ParseFloat(strings.TrimSpace(ws), 64)
		if !ok || nerr != nil || werr != nil || n < 1 || n > 200 || !finite(w) || w <= 0 || w > 100 {
			return 0, fmt.Errorf("%q is not a leaf layout: use 60, 80 or groups COUNTxWIDTH (mm) such as \"10x10,40x5,10x10\"", layout)
		}
		total += n
	}
	if total > 200 {
		return 0, fmt.Errorf("%q has %d leaf pairs; at most 200", layout, total)
	}
	return total, nil
}

// Beam is one photon beam of a machine.
type Beam struct {
	ID        int64   `json:"id"`
	MachineID int64   `json:"machine_id"`
	EnergyMV  float64 `json:"energy_mv"` // nominal energy, MV
	FFF       bool    `json:"fff"`       // flattening-filter-free
	Label     string  `json:"label"`     // "6 MV" or "6 MV FFF"
}

// BeamLabel is how a beam is displayed: "6 MV", "6 MV FFF".
func BeamLabel(energyMV float64, fff bool) string {
	s := strconv.FormatFloat(energyMV, 'f', -1, 64) + " MV"
	if fff {
		s += " FFF"
	}
	return s
}

// ParseBeamLabel reads "6 MV", "6MV FFF", "6FFF", "10x" or "6" back into
// an energy and a flattening-filter-free flag.
func ParseBeamLabel(s string) (energyMV float64, fff bool, err error) {
	t := strings.ToUpper(strings.Join(strings.Fields(s), ""))
	if strings.HasSuffix(t, "FFF") {
		fff = true
		t = strings.TrimSuffix(t, "FFF")
	}
	t = strings.TrimSuffix(strings.TrimSuffix(t, "MV"), "X")
	e, perr := strconv.ParseFloat(t, 64)
	if perr != nil || !finite(e) || e <= 0 || e > 50 {
		return 0, false, fmt.Errorf("beam %q is not an energy like \"6 MV\" or \"10 MV FFF\"", s)
	}
	return e, fff, nil
}

// Validate checks a beam before it is stored. Nominal photon energies are
// whole or half megavolts (4, 6, 10, 15, 18 MV; 2.5 MV imaging beams), so
// 6.0000000001 is refused rather than stored beside 6 as another beam
// (IEC 60976 states the nominal energy in MV; common practice).
func (b *Beam) Validate() error {
	var f Fields
	switch {
	case !finite(b.EnergyMV) || b.EnergyMV < 1 || b.EnergyMV > 50:
		f.Add("energy_mv", "must be a nominal photon energy between 1 and 50 MV (got %v)", b.EnergyMV)
	case b.EnergyMV*2 != math.Round(b.EnergyMV*2):
		f.Add("energy_mv", "%v MV is not a nominal energy; give whole or half megavolts such as 6, 10 or 2.5", b.EnergyMV)
	}
	b.Label = BeamLabel(b.EnergyMV, b.FFF)
	return f.Err("the beam is not valid")
}

// MachineService stores machines and beams.
type MachineService interface {
	// CreateMachine stores m and sets its ID. EInvalid for a bad machine,
	// EConflict when the name is taken (compared as MachineNameKey).
	CreateMachine(ctx context.Context, a Actor, m *Machine) error
	// Machine returns one machine; ENotFound when absent.
	Machine(ctx context.Context, id int64) (Machine, error)
	// MachineByName returns one machine by name, compared as MachineNameKey;
	// ENotFound when absent.
	MachineByName(ctx context.Context, name string) (Machine, error)
	// Machines lists all machines by name.
	Machines(ctx context.Context) ([]Machine, error)
	// CreateBeam stores b for machine b.MachineID and sets its ID.
	// ENotFound for an unknown machine, EConflict for a duplicate beam.
	CreateBeam(ctx context.Context, a Actor, b *Beam) error
	// Beams lists a machine's beams by energy.
	Beams(ctx context.Context, machineID int64) ([]Beam, error)
	// SetCollimators records a machine's collimator geometry and returns
	// the machine. EInvalid for a bad geometry, ENotFound for an unknown
	// machine.
	SetCollimators(ctx context.Context, a Actor, machineID int64, c Collimators) (Machine, error)
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
