package main

// Contours that cancel (issue 11, item 12). By the even-odd rule alone, an
// ROI whose every contour is written twice had volume 0: status "smaller
// than a voxel", no warning, an organ at risk quietly left out of the rules;
// two overlapping contours on one plane gave their symmetric difference.
// Now contours that cover each other without one lying inside the other are
// filled as their union (the same contour twice counts once), and a warning
// names the ROI and the planes on every output. Nested contours stay holes.

import (
	"encoding/csv"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestContoursThatCancel: in the uniform case (Γ = 0.667 everywhere, so
// every ROI evaluated passes), an organ at risk drawn twice on each plane
// and a target drawn as two overlapping boxes, each beside the same ROI
// drawn once, whose rasterisation is the truth: the same region, so the
// same voxels and volume.
func TestContoursThatCancel(t *testing.T) {
	f := newBadFixture(t)
	// Cord a sphere of radius 5 mm with every contour twice, Cord_single
	// the same drawn once; PTV_2 the box [-6, 6] × [-4, 4] × [-5, 5] drawn
	// on each plane as two boxes overlapping on [-2, 2], PTV_2_single drawn
	// as one box (testdata/bad-input, testdata/generate.py).
	rs := corpus(t, "contours_twice_and_overlapping.dcm")

	for _, proto := range []string{"tg218", "stereotactic"} {
		t.Run(proto, func(t *testing.T) {
			dir := t.TempDir()
			js, cs := filepath.Join(dir, "r.json"), filepath.Join(dir, "r.csv")
			r := vgRun(t, "compare", "--reference", f.ref, "--evaluated", f.eval, "--structures", rs, "--protocol", proto,
				"--criteria", "3%/2mm", "--json", js, "--csv", cs)
			if r.code != exitPass {
				t.Fatalf("exit %d, want 0 (every ROI passes at Γ = 0.667)\n%s", r.code, r)
			}
			res := readResultJSON(t, js)
			for _, pair := range [][2]string{{"Cord", "Cord_single"}, {"PTV_2", "PTV_2_single"}} {
				got, want := resultROI(t, res, pair[0]), resultROI(t, res, pair[1])
				if got.Status != "evaluated" || got.Voxels != want.Voxels || got.Voxels == 0 || math.Abs(got.VolumeCC-want.VolumeCC) > 1e-9 {
					t.Errorf("%s: %s, %d voxels, %.6g cc; drawn once: %d voxels, %.6g cc", pair[0], got.Status, got.Voxels, got.VolumeCC, want.Voxels, want.VolumeCC)
				}
			}
			// The box: 12 × 8 mm on the 6 planes z = -5, -3, …, 5, each a
			// 2 mm slab (roi/doc.go, the z rule): 12 × 8 × 12 mm³, within
			// the grid, its edges on whole even mm between sub-samples.
			checkNear(t, "PTV_2 volume_cc", &resultROI(t, res, "PTV_2").VolumeCC, 12*8*12/1000.0, 1e-9)
			// Every rule on them is evaluated: the OAR and the target are
			// in the rules (stereotactic has a rule on each OAR).
			for _, o := range res.Rules {
				if (o.Subject == "Cord" || o.Subject == "PTV_2") && (o.Value == nil || !o.Met) {
					t.Errorf("rule %q on %s: value %v, met %v (%s)", o.Rule, o.Subject, o.Value, o.Met, o.Reason)
				}
			}
			warnings := strings.Join(res.Warnings, "\n")
			for _, want := range []string{
				`ROI "Cord": the same contour twice on 4 planes (z = -3, -1, 1, 3 mm): counted once`,
				`ROI "PTV_2": contours overlapping without one inside the other on 6 planes (z = -5, -3, -1, 1, 3, 5 mm): filled as their union`,
			} {
				if !strings.Contains(warnings, want) {
					t.Errorf("JSON warnings lack %q:\n%s", want, warnings)
				}
				if !strings.Contains(r.stderr, "warning: "+want) {
					t.Errorf("console lacks %q", want)
				}
			}
			if strings.Contains(warnings, "Cord_single") || strings.Contains(warnings, "PTV_2_single") {
				t.Errorf("a warning on an ROI drawn once:\n%s", warnings)
			}
			fh, err := os.Open(cs)
			if err != nil {
				t.Fatal(err)
			}
			rows, err := csv.NewReader(fh).ReadAll()
			fh.Close()
			if err != nil {
				t.Fatal(err)
			}
			n := 0
			for _, row := range rows {
				if row[0] == "warning" && strings.Contains(strings.Join(row, ","), "Cord") {
					n++
				}
			}
			if n != 1 {
				t.Errorf("CSV has %d warning rows about Cord, want 1", n)
			}
		})
	}
}
