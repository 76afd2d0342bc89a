// Package profile analyses one-dimensional radiation beam profiles: the
// signal of a detector scanned or arrayed across a photon field.
//
// Analyze finds the two 50% edges of the field, the field size and centre,
// the 80–20 penumbra of each edge, and flatness and symmetry over the
// flattened region, in both the IEC 60976 forms and the common
// point-difference forms. Flattening-filter-free (FFF) profiles are detected
// (or flagged by the caller) and analysed by fitting a Hill function to each
// edge and renormalising the profile so that the inflection point sits at 50%
// (Fogliata et al., Med Phys 39:6455, 2012).
//
// Positions are in mm, signed, in the coordinates of the input (negative on
// the left). Signals are in any linear unit; results are in % of the
// normalisation value. The package does no I/O beyond ParseCSV, which reads
// two-column text from an io.Reader.
package profile
