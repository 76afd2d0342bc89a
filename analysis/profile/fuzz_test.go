package profile

import (
	"bytes"
	"encoding/binary"
	"encoding/json"
	"fmt"
	"math"
	"testing"
	"time"
)

// FuzzParseCSV: no input panics; what parses is finite and within the cap,
// and Analyze survives it.
func FuzzParseCSV(f *testing.F) {
	for _, s := range []string{
		"position_mm,signal\n-1,0\n0,1\n1,0\n",
		"# c\n1;2,5\n\n3\t4\n",
		"\xef\xbb\xbf1 2\r\n3 4 # x\r\n",
		"1,2,\n,\n;;\n",
		"x\n1e999,2\nNaN,1\n",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := ParseCSV(bytes.NewReader(data))
		if err != nil {
			return
		}
		if len(s) == 0 || len(s) > MaxCSVRows {
			t.Fatalf("%d samples without an error", len(s))
		}
		for _, v := range s {
			if math.IsNaN(v.PositionMM) || math.IsInf(v.PositionMM, 0) || math.IsNaN(v.Signal) || math.IsInf(v.Signal, 0) {
				t.Fatalf("non-finite sample %+v", v)
			}
		}
		checkAnalyze(t, s, Options{})
	})
}

// FuzzAnalyze: no samples or options make Analyze panic or hang; every
// result it returns is JSON-encodable (so finite) and ordered (left ≤ right,
// penumbrae ≥ 0).
func FuzzAnalyze(f *testing.F) {
	f.Add(encodeSamples(sampleAt(erfField{-50, 50, 2, 2}.at, grid(-80, 80, 2), 1, 0, nil)), uint8(0))
	f.Add(encodeSamples(sampleAt(testFFF.at, grid(-80, 80, 1), 1, 0, nil)), uint8(0))
	f.Add(encodeSamples(sampleAt(rampField{-20, 30, 5}.at, grid(-40, 50, 1), 7, 0, nil)), uint8(0x2f))
	f.Add(encodeSamples(sampleAt(erfField{-5, 5, 1, 1}.at, grid(-10, 10, 1), 1, 0, nil)), uint8(0xff))
	f.Add([]byte{}, uint8(3))
	f.Fuzz(func(t *testing.T, data []byte, flags uint8) {
		s := decodeSamples(data)
		opt := Options{Diagonal: flags&1 != 0, SmoothPasses: int(flags>>1) % (MaxSmoothPasses + 2)}
		if flags&8 != 0 {
			opt.Normalise = NormaliseMax
		}
		if flags&16 != 0 {
			opt.Interpolation = InterpCubic
		}
		if flags&32 != 0 {
			fff := flags&64 != 0
			opt.FFF = &fff
		}
		checkAnalyze(t, s, opt)
	})
}

// hangLimit: the fuzzer does not report an input that runs forever, so
// checkAnalyze panics (a crash the fuzzer records) when one call takes this
// long; a 400-sample FFF analysis takes milliseconds.
const hangLimit = 5 * time.Second

func checkAnalyze(t *testing.T, s []Sample, opt Options) {
	t.Helper()
	done := make(chan struct{})
	defer close(done)
	go func() {
		select {
		case <-done:
		case <-time.After(hangLimit):
			panic(fmt.Sprintf("Analyze ran over %v on %d samples %v with %+v", hangLimit, len(s), s, opt))
		}
	}()
	r, err := Analyze(s, opt)
	if err != nil {
		return
	}
	if _, err := json.Marshal(r); err != nil {
		t.Fatalf("result does not encode: %v\n%+v", err, r)
	}
	if !(r.LeftEdgeMM <= r.RightEdgeMM) || !(r.LeftPenumbraMM >= 0) || !(r.RightPenumbraMM >= 0) {
		t.Fatalf("disordered result %+v", r)
	}
}

// encodeSamples packs samples as little-endian float64 pairs.
func encodeSamples(s []Sample) []byte {
	b := make([]byte, 0, 16*len(s))
	for _, v := range s {
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v.PositionMM))
		b = binary.LittleEndian.AppendUint64(b, math.Float64bits(v.Signal))
	}
	return b
}

func decodeSamples(b []byte) []Sample {
	s := make([]Sample, len(b)/16)
	for i := range s {
		s[i].PositionMM = math.Float64frombits(binary.LittleEndian.Uint64(b[16*i:]))
		s[i].Signal = math.Float64frombits(binary.LittleEndian.Uint64(b[16*i+8:]))
	}
	return s
}
