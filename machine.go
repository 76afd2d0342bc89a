package halfmark

import (
	"context"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"
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

// Validate checks a machine before it is stored.
func (m *Machine) Validate() error {
	var f Fields
	m.Name = strings.TrimSpace(m.Name)
	checkText(&f, "name", m.Name, 1, 80)
	checkText(&f, "model", m.Model, 0, 200)
	checkText(&f, "serial", m.Serial, 0, 200)
	checkText(&f, "mlc_layout", m.MLCLayout, 0, 200)
	if m.SADcm == 0 {
		m.SADcm = 100
	}
	if !finite(m.SADcm) || m.SADcm < 50 || m.SADcm > 200 {
		f.Add("sad_cm", "must be between 50 and 200 cm (got %v); most linacs have SAD 100 cm", m.SADcm)
	}
	if m.MLCLeafPairs < 0 || m.MLCLeafPairs > 200 {
		f.Add("mlc_leaf_pairs", "must be between 0 and 200 (got %d)", m.MLCLeafPairs)
	}
	if m.Collimators != nil {
		m.Collimators.validate(&f, m.SADcm, m.MLCLeafPairs > 0)
	}
	return f.Err("the machine is not valid")
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

// Validate checks a beam before it is stored.
func (b *Beam) Validate() error {
	var f Fields
	if !finite(b.EnergyMV) || b.EnergyMV < 1 || b.EnergyMV > 50 {
		f.Add("energy_mv", "must be a nominal photon energy between 1 and 50 MV (got %v)", b.EnergyMV)
	}
	b.Label = BeamLabel(b.EnergyMV, b.FFF)
	return f.Err("the beam is not valid")
}

// MachineService stores machines and beams.
type MachineService interface {
	// CreateMachine stores m and sets its ID. EInvalid for a bad machine,
	// EConflict when the name is taken.
	CreateMachine(ctx context.Context, a Actor, m *Machine) error
	// Machine returns one machine; ENotFound when absent.
	Machine(ctx context.Context, id int64) (Machine, error)
	// MachineByName returns one machine by exact name; ENotFound when absent.
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

// checkText rejects invalid UTF-8, control characters and lengths outside
// [min, max] runes.
func checkText(f *Fields, field, s string, min, max int) {
	if !utf8.ValidString(s) {
		f.Add(field, "is not valid UTF-8 text")
		return
	}
	n := utf8.RuneCountInString(s)
	if n < min {
		f.Add(field, "is required")
		return
	}
	if n > max {
		f.Add(field, "is %d characters long; at most %d are allowed", n, max)
	}
	for _, r := range s {
		if r < 0x20 && r != '\t' || r == 0x7f {
			f.Add(field, "contains a control character; use plain text")
			return
		}
	}
}
