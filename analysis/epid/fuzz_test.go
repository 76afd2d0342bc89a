package epid

import (
	"bytes"
	"errors"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"
)

// smallRTImage is a 64 × 48 RT Image with a field in the middle: a quick seed.
func smallRTImage(t testing.TB) []byte {
	pix := make([]float64, 64*48)
	for r := range 48 {
		for c := range 64 {
			if r > 12 && r < 36 && c > 16 && c < 48 {
				pix[r*64+c] = 3000
			} else {
				pix[r*64+c] = 100
			}
		}
	}
	d := newDCM(pix)
	d.rows, d.cols = 48, 64
	return d.bytes(t)
}

// FuzzDecodeDICOM: no input may panic DecodeDICOM or the analyses that follow
// it; every failure must be one of the package's errors.
func FuzzDecodeDICOM(f *testing.F) {
	seed := smallRTImage(f)
	f.Add(seed)
	for _, n := range []int{0, 100, 132, 140, 200, 300, len(seed) / 2, len(seed) - 2} {
		f.Add(seed[:n])
	}
	for _, off := range []int{130, 140, 150, 200, 300, 400} {
		b := bytes.Clone(seed)
		b[off] ^= 0xff
		f.Add(b)
	}
	if files, err := filepath.Glob(filepath.Join(moduleDirForFuzz(), "testdata", "6.dcm")); err == nil && len(files) == 1 {
		if b, err := os.ReadFile(files[0]); err == nil {
			f.Add(b)
		}
	}
	geometry := DecodeOptions{SIDmm: 1500, SADmm: 1000, PixelSpacingMM: [2]float64{0.392, 0.392}, MaxBytes: 8 << 20}
	f.Fuzz(func(t *testing.T, b []byte) {
		for _, o := range []DecodeOptions{{MaxBytes: 8 << 20}, geometry} {
			im, err := DecodeDICOM(bytes.NewReader(b), int64(len(b)), o)
			if err != nil {
				if !errors.Is(err, ErrNotDICOM) && !errors.Is(err, ErrUnsupported) && !errors.Is(err, ErrMissingTag) &&
					!errors.Is(err, ErrInvalidImage) && !errors.Is(err, ErrInvalidOption) {
					t.Fatalf("error outside the package's kinds: %v", err)
				}
				continue
			}
			if im.Rows*im.Cols > 1<<20 {
				continue // keep each fuzz run quick
			}
			_, _ = AnalyzeField(im, FieldOptions{})
			_, _ = AnalyzePicketFence(im, PicketOptions{Layout: Layout60})
		}
	})
}

// moduleDirForFuzz finds the DICOM module directory without failing the fuzz
// setup when the go tool is unavailable.
func moduleDirForFuzz() string {
	dir := os.Getenv("GOMODCACHE")
	if dir == "" {
		home, _ := os.UserHomeDir()
		dir = filepath.Join(home, "go", "pkg", "mod")
	}
	return filepath.Join(dir, "github.com", "suyashkumar", "dicom@v1.1.0")
}

// TestAnalysisNeverPanics feeds random small images (noise, steps, constant
// areas, odd spacings) to both analyses: each returns a result or an error.
func TestAnalysisNeverPanics(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 13))
	for i := range 300 {
		rows, cols := 16+rng.IntN(80), 16+rng.IntN(80)
		im := Image{Rows: rows, Cols: cols, Pix: make([]float64, rows*cols),
			RowSpacingMM: 0.05 + 3*rng.Float64(), ColSpacingMM: 0.05 + 3*rng.Float64(), Inverted: rng.IntN(2) == 0}
		kind := i % 4
		for k := range im.Pix {
			switch kind {
			case 0:
				im.Pix[k] = rng.NormFloat64()
			case 1:
				if k%cols > cols/3 && k/cols > rows/4 {
					im.Pix[k] = 100
				}
			case 2:
				im.Pix[k] = float64(rng.IntN(3))
			}
		}
		_, _ = AnalyzeField(im, FieldOptions{})
		_, _ = AnalyzePicketFence(im, PicketOptions{Layout: Layout80})
		_, _ = AnalyzePicketFence(im, PicketOptions{Layout: Layout60, NominalMM: []float64{-1, 0, 1}})
	}
}
