package main

// The linear-gradient case on RT Dose files that voxgamma did not write:
// pydicom (Debian's python3-pydicom) and numpy wrote the reference and the
// evaluated dose of testdata/dicom/gradient, with their own geometry
// conventions and quantisation (testdata/generate.py), and the whole
// command is checked against the closed form.

import (
	"encoding/binary"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/internal/fixture"
	"voxgamma/metaimage"
)

// TestComparePydicomLinearGradient: the linear-gradient shift of
// TestCompareLinearGradientShift (closed form Γ² = s²/(Δd² + (ΔD/g)²),
// Low et al. 1998, derivation in gamma/gamma_test.go
// TestLinearGradientShift) on the files pydicom wrote
// (testdata/dicom/gradient):
//
//   - reference head-first supine, PixelSpacing [Δrow 2.5, Δcol 2] (not
//     square, so a swap of the order shows), absolute GridFrameOffsetVector
//     (3 mm frames), 14 columns, 12 rows, 8 frames;
//   - evaluated feet-first supine (row along −x, frames along −z), 1.5 mm,
//     relative GridFrameOffsetVector, reaching ≥ 9.75 mm beyond the
//     reference on every side (more than the 6 mm search distance).
//
// Tolerance as in TestCompareLinearGradientShift, with the quantisation
// error each file really has (numpy's account in case.json: |stored ×
// DoseGridScaling − analytic|, float64) plus voxgamma's float32 rounding of
// each read value (2^-24 relative). The JSON results are the golden files
// gradient-global.json and gradient-local.json (golden_test.go).
func TestComparePydicomLinearGradient(t *testing.T) {
	c := fixture.LoadCase(t, "gradient")
	if c.AGy != rampA || c.GGyPerMM != rampG || c.N != rampN {
		t.Fatalf("the gradient case's field a=%g g=%g n=%v, want the ramp of these tests (%g, %g, %v)", c.AGy, c.GGyPerMM, c.N, rampA, rampG, rampN)
	}
	s := c.ShiftMM // 2.5 mm; global Γ = 2.5/√13 = 0.693
	const cols, rows, frames = 14, 12, 8
	if c.Reference.Dims != [3]int{cols, rows, frames} {
		t.Fatalf("reference dims %v", c.Reference.Dims)
	}
	qr, qe := c.Reference.ReadBound(), c.Evaluated.ReadBound()
	for _, d := range []fixture.Dose{c.Reference, c.Evaluated} {
		if d.MaxQuantisationErrorGy > d.DoseGridScaling/2*(1+1e-9) {
			t.Fatalf("%s: quantisation error %g above half the scaling %g", d.File, d.MaxQuantisationErrorGy, d.DoseGridScaling)
		}
	}
	raw := fixture.Read(t, "dicom/gradient/"+c.Reference.Analytic)
	nRef := cols * rows * frames
	if len(raw) != 8*nRef {
		t.Fatalf("analytic reference: %d bytes, want %d", len(raw), 8*nRef)
	}
	dr := make([]float64, nRef) // frame-major, row-major: i fastest
	for n := range dr {
		dr[n] = math.Float64frombits(binary.LittleEndian.Uint64(raw[8*n:]))
	}

	for _, local := range []bool{false, true} {
		name := "global"
		if local {
			name = "local"
		}
		t.Run(name, func(t *testing.T) {
			mapOut := filepath.Join(t.TempDir(), "gamma.mha")
			args := []string{"--reference", "dicom/gradient/RD_reference.dcm", "--evaluated", "dicom/gradient/RD_evaluated.dcm",
				"--no-structures", "--criteria", "3%/2mm", "--norm-dose", "10", "--gamma-map", mapOut}
			if local {
				args = append(args, "--local")
			}
			want := make([]float64, nRef)
			tols := make([]float64, nRef)
			maxTol := 0.0
			for n, d := range dr {
				dd := cfDelta * cfNorm
				want[n] = shiftGamma(s, cfDTA, dd, rampG)
				tols[n] = (qr+qe)/dd + engineTol
				if local {
					want[n] = shiftGamma(s, cfDTA, cfDelta*d, rampG)
					tols[n] = (qr+qe)/(cfDelta*(d-qr)) + want[n]*qr/(d-qr) + engineTol
				}
				maxTol = math.Max(maxTol, tols[n])
			}
			boundaryClear(t, want, tols)
			// Every Γ is below 1 (global 0.693; local at most s/√(Δd² + (δ·D_min/g)²)
			// with D_min ≈ 7.98 Gy: 0.80): TG-218's limits are met, exit 0.
			res := goldenRun(t, "gradient-"+name, exitPass, args...)
			checkGammaStats(t, "overall", res.Overall, want, maxTol)

			// The grids as voxgamma read them: dims [columns, rows, frames],
			// spacing [Δx, Δy, Δz] = [Δcol, Δrow, frame step].
			for _, in := range res.Inputs {
				if in.Grid == nil {
					t.Errorf("input %s: no grid", in.Role)
					continue
				}
				var wantDims [3]int
				var wantSp [3]float64
				switch in.Role {
				case "reference":
					wantDims, wantSp = [3]int{14, 12, 8}, [3]float64{2, 2.5, 3}
					if in.Grid.OriginMM != [3]float64{-13, -13.75, -10.5} {
						t.Errorf("reference origin %v, ImagePositionPatient (-13, -13.75, -10.5)", in.Grid.OriginMM)
					}
				case "evaluated":
					wantDims, wantSp = [3]int{34, 35, 28}, [3]float64{1.5, 1.5, 1.5}
				default:
					t.Errorf("unexpected input role %q", in.Role)
				}
				if in.Grid.Dims != wantDims || in.Grid.SpacingMM != wantSp {
					t.Errorf("%s grid dims %v spacing %v, written as %v and %v", in.Role, in.Grid.Dims, in.Grid.SpacingMM, wantDims, wantSp)
				}
				if in.PatientName != "PHANTOM^TESTDATA" || in.DoseUnits != "GY" || in.DoseSummationType != "PLAN" {
					t.Errorf("%s: patient %q units %q summation %q", in.Role, in.PatientName, in.DoseUnits, in.DoseSummationType)
				}
			}

			gm, err := metaimage.Read(mapOut)
			if err != nil {
				t.Fatal(err)
			}
			if gm.Len() != nRef {
				t.Fatalf("gamma map has %d voxels, the reference %d", gm.Len(), nRef)
			}
			bad := 0
			for n, v := range gm.Data {
				i, j, k := gm.IJK(n)
				// The map is on the reference grid in the file's order
				// (head-first supine: i along x, j along y, k along z).
				m := i + cols*(j+rows*k)
				if math.Abs(float64(v)-want[m]) > tols[m] {
					if bad++; bad <= 5 {
						t.Errorf("voxel (%d,%d,%d): Γ = %.6f, closed form %.6f ± %.2g", i, j, k, v, want[m], tols[m])
					}
				}
			}
			if bad > 0 {
				t.Errorf("%d of %d voxels differ from the closed form", bad, nRef)
			}
			for _, w := range res.Warnings {
				if strings.Contains(w, "frame") || strings.Contains(w, "outside") {
					t.Errorf("unexpected warning: %s", w)
				}
			}
		})
	}
}
