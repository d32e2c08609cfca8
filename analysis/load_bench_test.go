package analysis

import (
	"fmt"
	"testing"

	"voxgamma/internal/benchcase"
)

// BenchmarkLoad reads the sweep generator's reference and noisy evaluated
// dose (internal/benchcase, 32-bit RT Dose files written once per size):
// decoding and hashing both files, the reference on its own goroutine.
//
//	go test -run '^$' -bench Load -count 6 ./analysis/
func BenchmarkLoad(b *testing.B) {
	for _, size := range []benchcase.Size{{128, 128, 80}, {256, 256, 160}} {
		b.Run(size.String(), func(b *testing.B) {
			fs, err := benchcase.Write(b.TempDir(), size, 2026)
			if err != nil {
				b.Fatal(err)
			}
			in := Inputs{Reference: fs.Reference, Evaluated: fs.Evaluated["pass"], NoStructures: true}
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				if _, err := Load(in); err != nil {
					b.Fatal(fmt.Errorf("loading %s: %w", size, err))
				}
			}
		})
	}
}

// BenchmarkDoseMeans measures the check of the doses' ratio made before
// every comparison (doseMeans: the mean reference and evaluated dose over
// the reference's high-dose points, the evaluated dose sampled at each) on
// the sweep generator's 256 × 256 × 160 reference and failing evaluated
// dose.
//
//	go test -run '^$' -bench DoseMeans -count 6 ./analysis/
func BenchmarkDoseMeans(b *testing.B) {
	size := benchcase.Size{256, 256, 160}
	ref, err := benchcase.Reference(size)
	if err != nil {
		b.Fatal(err)
	}
	eval, err := benchcase.Evaluated(size, benchcase.Variants[len(benchcase.Variants)-1], 2026)
	if err != nil {
		b.Fatal(err)
	}
	p := &Prepared{Loaded: &Loaded{Reference: ref, Evaluated: eval}}
	b.ResetTimer()
	for b.Loop() {
		if _, _, n := p.doseMeans(); n == 0 {
			b.Fatal("no high-dose point")
		}
	}
}
