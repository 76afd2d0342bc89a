package epid

import (
	"encoding/binary"
	"errors"
	"testing"
)

func TestDecodeFrameFormats(t *testing.T) {
	// Stored values per PS3.5 section 8 (from memory): bits above HighBit are
	// ignored, BitsStored bits end at HighBit, PixelRepresentation 1 is two's
	// complement in BitsStored bits; then value·slope + intercept (PS3.3
	// C.11.1 Modality LUT).
	base := pixelFormat{rows: 1, cols: 4, frames: 1, slope: 1}
	cases := []struct {
		name  string
		p     pixelFormat
		order binary.ByteOrder
		raw   []byte
		want  []float64
	}{
		{"8-bit", with(base, 8, 8, 7, false), binary.LittleEndian, []byte{0, 1, 128, 255}, []float64{0, 1, 128, 255}},
		{"16-bit LE", with(base, 16, 16, 15, false), binary.LittleEndian, []byte{1, 0, 0, 1, 0xff, 0xff, 0x34, 0x12}, []float64{1, 256, 65535, 0x1234}},
		{"16-bit BE", with(base, 16, 16, 15, false), binary.BigEndian, []byte{0, 1, 1, 0, 0xff, 0xff, 0x12, 0x34}, []float64{1, 256, 65535, 0x1234}},
		// 12 stored bits, signed: 0x0FFF = −1, 0x0800 = −2048, 0x07FF = 2047; the top nibble is overlay junk.
		{"12-bit signed", with(base, 16, 12, 11, true), binary.LittleEndian, []byte{0xff, 0xff, 0x00, 0xf8, 0xff, 0x07, 0x05, 0xa0}, []float64{-1, -2048, 2047, 5}},
		// HighBit 15 with 12 stored bits: the value sits in the top 12 bits.
		{"12 bits high", with(base, 16, 12, 15, false), binary.LittleEndian, []byte{0x10, 0x00, 0xf0, 0xff, 0, 0, 0x00, 0x80}, []float64{1, 4095, 0, 2048}},
		{"32-bit", with(base, 32, 32, 31, false), binary.LittleEndian, []byte{1, 0, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0, 0xff, 0xff, 0xff, 0xff}, []float64{1, 65536, 0, 4294967295}},
	}
	for _, c := range cases {
		got, err := decodeFrame(c.raw, c.order, c.p, 0)
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		for i := range c.want {
			if got[i] != c.want[i] {
				t.Errorf("%s: pixel %d = %g, want %g", c.name, i, got[i], c.want[i])
			}
		}
	}
	// Modality LUT: 2·v − 100.
	p := with(base, 8, 8, 7, false)
	p.slope, p.intercept = 2, -100
	got, _ := decodeFrame([]byte{0, 50, 100, 1}, binary.LittleEndian, p, 0)
	if got[0] != -100 || got[2] != 100 {
		t.Errorf("rescale: %v", got)
	}
	// A padding byte is accepted; any other length mismatch is not.
	if _, err := decodeFrame([]byte{1, 2, 3, 4, 0}, binary.LittleEndian, with(base, 8, 8, 7, false), 0); err != nil {
		t.Errorf("padding byte: %v", err)
	}
	if _, err := decodeFrame([]byte{1, 2, 3}, binary.LittleEndian, with(base, 8, 8, 7, false), 0); !errors.Is(err, ErrInvalidImage) {
		t.Errorf("short data: %v", err)
	}
	for name, p := range map[string]pixelFormat{
		"1-bit":          with(base, 1, 1, 0, false),
		"stored > alloc": with(base, 8, 12, 11, false),
		"high bit":       with(base, 16, 12, 3, false),
		"zero slope":     {rows: 1, cols: 4, frames: 1, bitsAllocated: 8, bitsStored: 8, highBit: 7},
		"no rows":        with(pixelFormat{cols: 4, frames: 1, slope: 1}, 8, 8, 7, false),
	} {
		if _, err := decodeFrame(make([]byte, 8), binary.LittleEndian, p, 0); err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}

func with(p pixelFormat, alloc, stored, high int, signed bool) pixelFormat {
	p.bitsAllocated, p.bitsStored, p.highBit, p.signed = alloc, stored, high, signed
	return p
}
