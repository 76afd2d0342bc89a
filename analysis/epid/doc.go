// Package epid analyses 2-D portal (EPID) images: radiation field edges of a
// jaw-defined field and MLC picket fences. It does no file I/O; DecodeDICOM
// reads a DICOM RT Image from a reader the caller opened.
//
// # Coordinates
//
// An Image is stored row-major as displayed: row 0 at the top, column 0 at
// the left, viewed from the source (beam's-eye view) at gantry 0, collimator 0.
// Positions are reported in mm in the isocentre plane, relative to the beam
// central axis (Image.AxisRow, Image.AxisCol: the image centre, or the point
// given by RTImagePosition):
//
//	x_mm = (col - AxisCol) * ColSpacingMM * SAD/SID    x grows to the right, toward X2
//	y_mm = (AxisRow - row) * RowSpacingMM * SAD/SID    y grows toward row 0 (the top), toward Y2
//
// This follows the IEC 61217 beam-limiting-device axes (from memory): jaw X1
// on the negative-x side, X2 on the positive-x side, Y1 on the negative-y
// side, Y2 on the positive-y side (at gantry 0 the +y axis points toward the
// gantry stand). So X1 is the left side of the image, X2 the right side, Y2
// the top rows and Y1 the bottom rows. Imagers and export software differ in
// how they flip and rotate the image; check the convention once on a known
// asymmetric field (e.g. X1 = 2 cm, X2 = 8 cm) before trusting jaw names.
// Jaw names are never remapped for the collimator angle: at collimator 90° the
// "X1" edge is still the left side of the image, and a warning says so.
//
// A jaw distance such as x1_mm is the perpendicular distance from the central
// axis to that edge's 50% line, positive when the edge lies on its own side of
// the axis, so field_x_mm = x1_mm + x2_mm and centre_x_mm = (x2_mm - x1_mm)/2.
//
// # Magnification
//
// A length measured in the imager plane at distance SID from the source maps
// to the isocentre plane by SAD/SID (physics.md, common practice). With
// ImagePlanePixelSpacing 0.392 mm at SID 1500 mm and SAD 1000 mm the pixel is
// 0.392·1000/1500 = 0.2613 mm at the isocentre.
package epid
