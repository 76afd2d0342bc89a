package drift

import "halfmark"

// Quantities the tolerance book sets beyond the per-edge ones
// (halfmark.QPosition, QPenumbra, QLightOffset): limits that apply to a
// component's own quantity rather than to one series.
const (
	QFieldSize    halfmark.Quantity = "field_size"    // X1 + X2 (or Y1 + Y2) change, mm
	QCentreOffset halfmark.Quantity = "centre_offset" // (X2 − X1)/2 change, mm
	QMLCLeaf      halfmark.Quantity = "mlc_leaf"      // one leaf end: its residual after the bank mean, mm
	QMLCBankMean  halfmark.Quantity = "mlc_bank_mean" // mean deviation of a bank's leaf ends, mm
)
