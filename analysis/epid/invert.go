package epid

import (
	"fmt"
	"math"
	"slices"
)

// darkField judges from the pixels whether the irradiated area (an open field
// or picket strips) is darker than the background, i.e. whether the stored
// greyscale falls as dose rises. On a subsample of about 16 000 pixels:
//
//  1. If the median of the central 10% × 10% box and the median of the outer
//     4% frame differ by more than a quarter of the 1st–99th percentile range,
//     the centre is the field: dark = centre < frame.
//  2. Otherwise (a small or off-centre field, a picket fence) the irradiated
//     pixels are the minority, so they form the long tail of the histogram:
//     dark when p50 - p01 > 1.5·(p99 - p50), bright when
//     p99 - p50 > 1.5·(p50 - p01) (percentiles of the subsample).
//
// decided is false for a flat image or when neither rule is clear.
func darkField(im Image) (dark, decided bool) {
	step := max(1, int(math.Sqrt(float64(im.Rows*im.Cols)/16000)))
	all := make([]float64, 0, (im.Rows/step+1)*(im.Cols/step+1))
	var centre, frame []float64
	r0, r1 := im.Rows*45/100, im.Rows*55/100
	c0, c1 := im.Cols*45/100, im.Cols*55/100
	br, bc := max(1, im.Rows*4/100), max(1, im.Cols*4/100)
	for r := 0; r < im.Rows; r += step {
		for c := 0; c < im.Cols; c += step {
			v := im.Pix[r*im.Cols+c]
			all = append(all, v)
			if r < br || r >= im.Rows-br || c < bc || c >= im.Cols-bc {
				frame = append(frame, v)
			}
		}
	}
	for r := r0; r <= r1; r++ {
		for c := c0; c <= c1; c += max(1, step/2) {
			centre = append(centre, im.Pix[r*im.Cols+c])
		}
	}
	slices.Sort(all)
	p01 := all[len(all)/100]
	p50 := all[len(all)/2]
	p99 := all[len(all)*99/100]
	spread := p99 - p01
	if !(spread > 0) {
		return false, false
	}
	if len(centre) > 0 && len(frame) > 0 {
		slices.Sort(centre)
		slices.Sort(frame)
		d := centre[len(centre)/2] - frame[len(frame)/2]
		if math.Abs(d) > 0.25*spread {
			return d < 0, true
		}
	}
	up, down := p99-p50, p50-p01
	switch {
	case up > 1.5*down:
		return false, true
	case down > 1.5*up:
		return true, true
	}
	return false, false
}

// decideFlip applies mode and returns whether to flip the stored values so
// that the signal rises with dose, with warnings explaining the choice.
func decideFlip(im Image, mode InvertMode) (flip bool, warn []string, err error) {
	switch mode {
	case InvertNever:
		return false, nil, nil
	case InvertAlways:
		return true, nil, nil
	case InvertFromImage:
		return im.Inverted, nil, nil
	case InvertAuto:
	default:
		return false, nil, fmt.Errorf("%w: InvertMode %d; use InvertAuto, InvertFromImage, InvertNever or InvertAlways", ErrInvalidOption, mode)
	}
	dark, decided := darkField(im)
	switch {
	case !decided:
		return im.Inverted, []string{"could not tell from the image whether the greyscale is inverted; the file's PhotometricInterpretation (or Image.Inverted) was used"}, nil
	case dark && !im.Inverted:
		return true, []string{"the irradiated area is darker than the background: greyscale treated as inverted"}, nil
	case !dark && im.Inverted:
		return false, []string{"image is marked inverted (MONOCHROME1) but the irradiated area is brighter than the background in the stored values: values used as stored"}, nil
	}
	return dark, nil, nil
}
