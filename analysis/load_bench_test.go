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
