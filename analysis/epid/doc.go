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
// gantry stand). So in an analysed Image X1 is the left side, X2 the right
// side, Y2 the top rows and Y1 the bottom rows.
//
// DecodeDICOM puts a stored RT Image into that frame (see placeImage and
// frameMap): it reads RTImageOrientation (3002,0010) (axis-aligned flips and
// rotations are remapped, anything else refused), XRayImageReceptorAngle
// (3002,000E) (refused beyond 0.1°) and the collimator angle
// BeamLimitingDeviceAngle (300A,0120), whose quadrant (0, 90, 180, 270°,
// counter-clockwise seen from the source) turns the image so that the names
// follow the jaws: at 90° X2 is at the top of the stored image and Y2 on its
// left, at 180° X1↔X2 and Y1↔Y2. MLC banks and leaf pairs follow the same
// way. The axis comes from RTImagePosition (3002,0012) and
// XRayImageReceptorTranslation (3002,000D). Image.Geometry records all of
// it, and every result copies it as geometry_used. Images built with
// FromArray are taken as already in that frame.
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
