package epid

import (
	"encoding/binary"
	"fmt"
	"math"
)

// pixelFormat describes native (uncompressed) greyscale pixel data
// (PS3.3 C.7.6.3 Image Pixel module; PS3.5 section 8).
type pixelFormat struct {
	rows, cols, frames int
	bitsAllocated      int // 8, 16 or 32
	bitsStored         int // 1..bitsAllocated
	highBit            int // bitsStored-1 ..bitsAllocated-1
	signed             bool
	slope, intercept   float64 // Modality LUT: value = stored·slope + intercept
}

func (p pixelFormat) check() error {
	if p.rows <= 0 || p.cols <= 0 || p.rows > 1<<15 || p.cols > 1<<15 {
		return badTag("Rows/Columns", "(0028,0010)/(0028,0011)", fmt.Sprintf("image is %d×%d; each side must be 1..32768", p.rows, p.cols))
	}
	if p.frames <= 0 || p.frames > 1<<16 {
		return badTag("NumberOfFrames", "(0028,0008)", fmt.Sprintf("%d frames; must be at least 1", p.frames))
	}
	switch p.bitsAllocated {
	case 8, 16, 32:
	default:
		return fmt.Errorf("%w: BitsAllocated (0028,0100) = %d; only 8, 16 and 32 are supported", ErrUnsupported, p.bitsAllocated)
	}
	if p.bitsStored < 1 || p.bitsStored > p.bitsAllocated {
		return badTag("BitsStored", "(0028,0101)", fmt.Sprintf("%d with BitsAllocated %d", p.bitsStored, p.bitsAllocated))
	}
	if p.highBit < p.bitsStored-1 || p.highBit >= p.bitsAllocated {
		return badTag("HighBit", "(0028,0102)", fmt.Sprintf("%d with BitsStored %d and BitsAllocated %d", p.highBit, p.bitsStored, p.bitsAllocated))
	}
	if p.slope == 0 || math.IsNaN(p.slope) || math.IsInf(p.slope, 0) || math.IsNaN(p.intercept) || math.IsInf(p.intercept, 0) {
		return badTag("RescaleSlope/RescaleIntercept", "(0028,1053)/(0028,1052)", fmt.Sprintf("slope %g, intercept %g; slope must be finite and non-zero", p.slope, p.intercept))
	}
	return nil
}

// frameBytes is the size of one frame in bytes.
func (p pixelFormat) frameBytes() int { return p.rows * p.cols * p.bitsAllocated / 8 }

// decodeFrame converts frame number f (0-based) of raw native pixel data to
// float64 values after the Modality LUT. raw may carry one trailing padding
// byte (PS3.5 section 8.1.1).
func decodeFrame(raw []byte, order binary.ByteOrder, p pixelFormat, f int) ([]float64, error) {
	if err := p.check(); err != nil {
		return nil, err
	}
	fb := p.frameBytes()
	want := int64(fb) * int64(p.frames)
	if n := int64(len(raw)); n != want && n != want+1 {
		return nil, fmt.Errorf("%w: PixelData holds %d bytes but Rows×Columns×NumberOfFrames×BitsAllocated/8 = %d×%d×%d×%d/8 = %d; the file is truncated or its image attributes are wrong",
			ErrInvalidImage, n, p.rows, p.cols, p.frames, p.bitsAllocated, want)
	}
	if f < 0 || f >= p.frames {
		return nil, fmt.Errorf("%w: frame %d requested but the image has %d frame(s) (frames count from 0)", ErrInvalidOption, f, p.frames)
	}
	src := raw[f*fb : (f+1)*fb]
	n := p.rows * p.cols
	out := make([]float64, n)
	shift := uint(p.highBit + 1 - p.bitsStored)
	mask := uint64(1)<<uint(p.bitsStored) - 1
	signBit := uint64(1) << uint(p.bitsStored-1)
	full := int64(1) << uint(p.bitsStored)
	bytesPer := p.bitsAllocated / 8
	for i := 0; i < n; i++ {
		var u uint64
		switch bytesPer {
		case 1:
			u = uint64(src[i])
		case 2:
			u = uint64(order.Uint16(src[2*i:]))
		default:
			u = uint64(order.Uint32(src[4*i:]))
		}
		u = (u >> shift) & mask
		v := int64(u)
		if p.signed && u&signBit != 0 {
			v -= full
		}
		out[i] = float64(v)*p.slope + p.intercept
	}
	return out, nil
}
