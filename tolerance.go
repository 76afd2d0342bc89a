package halfmark

// Quantities a tolerance book may set beyond the per-edge ones (QPosition,
// QPenumbra, QLightOffset).
const (
	QFieldSize    Quantity = "field_size"    // X1 + X2 (or Y1 + Y2), mm
	QCentreOffset Quantity = "centre_offset" // (X2 − X1)/2, mm
	QMLCLeaf      Quantity = "mlc_leaf"      // one MLC leaf end position, mm
	QMLCBankMean  Quantity = "mlc_bank_mean" // mean deviation of a bank's leaf ends, mm
)

// Limits are the local tolerance and action limit for one quantity: the
// largest |deviation from baseline| (mm, or % for flatness/symmetry) that
// is inside tolerance (TG-142 Level 2 beyond it) and inside the action
// limit (Level 3 beyond it).
type Limits struct {
	ToleranceMM float64 `json:"tolerance_mm"`
	ActionMM    float64 `json:"action_mm"`
	Source      string  `json:"source"` // where the value comes from, e.g. "AAPM TG-142 Table II (daily)" or "local choice"
}

// ToleranceBook is the tolerance file in force. The local physicist sets
// the values and is responsible for them.
type ToleranceBook interface {
	// Limits returns the limits for a quantity of an edge measured in a
	// check of the given kind; asymmetric is true for an asymmetric jaw
	// setting. ok is false when the book sets no limit for it.
	Limits(q Quantity, kind CheckKind, edge string, asymmetric bool) (l Limits, ok bool)
	// Hash identifies the file's content (hex SHA-256); every evaluation
	// records it.
	Hash() string
	// Source names the file, or says that the shipped example is in force.
	Source() string
	// IsShippedExample is true when no --tolerances file was given.
	IsShippedExample() bool
}
