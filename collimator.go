package halfmark

// Collimators is where a machine's beam-limiting devices sit, from the
// machine's documentation: which jaw pair is nearer the source and the
// source-to-collimator distance (SCD, cm) of the upper jaws, the lower jaws
// and the MLC. The penumbra model needs them: a collimator's geometric
// penumbra scales with (SSD + d − SCD)/SCD (Khan, The Physics of Radiation
// Therapy — from memory).
type Collimators struct {
	UpperJaws  string  `json:"upper_jaws"`   // "X" or "Y": the jaw pair nearer the source
	UpperSCDcm float64 `json:"upper_scd_cm"` // source to the upper jaws, cm
	LowerSCDcm float64 `json:"lower_scd_cm"` // source to the lower jaws, cm
	MLCSCDcm   float64 `json:"mlc_scd_cm"`   // source to the MLC, cm; 0 when the machine has no MLC
}

// validate checks c against the machine's SAD (cm) and MLC; field names
// are prefixed "collimators.".
func (c *Collimators) validate(f *Fields, sadCm float64, hasMLC bool) {
	switch c.UpperJaws {
	case "x":
		c.UpperJaws = "X"
	case "y":
		c.UpperJaws = "Y"
	}
	if c.UpperJaws != "X" && c.UpperJaws != "Y" {
		f.Add("collimators.upper_jaws", "must be \"X\" or \"Y\": the jaw pair nearer the source (got %q)", c.UpperJaws)
	}
	scd := func(field string, v float64) bool {
		switch {
		case !finite(v) || v <= 0:
			f.Add("collimators."+field, "must be a positive distance from the source in cm (got %v)", v)
		case v >= sadCm:
			f.Add("collimators."+field, "%v cm is not above the isocentre: a collimator sits between the source and the SAD (%v cm)", v, sadCm)
		default:
			return true
		}
		return false
	}
	okU := scd("upper_scd_cm", c.UpperSCDcm)
	okL := scd("lower_scd_cm", c.LowerSCDcm)
	if okU && okL && c.UpperSCDcm >= c.LowerSCDcm {
		f.Add("collimators.lower_scd_cm", "%v cm must be larger than upper_scd_cm (%v cm): the lower jaws are further from the source", c.LowerSCDcm, c.UpperSCDcm)
	}
	switch {
	case c.MLCSCDcm == 0 && hasMLC:
		f.Add("collimators.mlc_scd_cm", "is required: the machine has an MLC (mlc_leaf_pairs > 0)")
	case c.MLCSCDcm == 0:
	case !hasMLC:
		f.Add("collimators.mlc_scd_cm", "must be 0 or left out: the machine has no MLC (mlc_leaf_pairs 0)")
	case scd("mlc_scd_cm", c.MLCSCDcm) && (c.MLCSCDcm == c.UpperSCDcm || c.MLCSCDcm == c.LowerSCDcm):
		f.Add("collimators.mlc_scd_cm", "%v cm equals a jaw's distance; give the MLC's own source distance", c.MLCSCDcm)
	}
}

// ValidateCollimators checks a collimator record for machine m before it
// is stored.
func (m *Machine) ValidateCollimators(c *Collimators) error {
	var f Fields
	c.validate(&f, m.SADcm, m.MLCLeafPairs > 0)
	return f.Err("the collimator geometry is not valid")
}
