package dicomio_test

import (
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
)

// TestWriteMapSummation: a map written for a reference that names no RT
// Plan carries dicomio.MapSummationType and no ReferencedRTPlanSequence;
// one for a reference that names a plan carries the reference's summation
// and references. Checked against dicom3tools' dciodvfy (the RT Dose IOD,
// PS3.3 A.18; its conditions of C.8.8.3: ReferencedRTPlanSequence required
// for PLAN ... CONTROL_POINT and not present otherwise, a fraction group for
// FRACTION and BEAM, a beam for BEAM) and pydicom (what the file holds).
// Before: PLAN without a plan reference, "Missing attribute Type 1C
// ReferencedRTPlanSequence".
func TestWriteMapSummation(t *testing.T) {
	g := testGrid(t, orientations[0], frameSets["uniform"])
	withPlan := dicomio.PhantomIdentifiers("", "")
	noPlan := withPlan
	noPlan.ReferencedRTPlanUID = ""
	dir := t.TempDir()
	type file struct {
		name, wantSum, wantPlan string
		signed                  bool
	}
	var files []file
	for _, tc := range []struct {
		name string
		ref  *dicomio.DoseInfo
		ids  dicomio.Identifiers
		sum  string
		plan string
	}{
		{"no_plan", &dicomio.DoseInfo{DoseSummationType: "PLAN"}, noPlan, dicomio.MapSummationType, ""},
		{"plan", &dicomio.DoseInfo{Identifiers: withPlan, DoseSummationType: "PLAN"}, withPlan, "PLAN", withPlan.ReferencedRTPlanUID},
		{"fraction", &dicomio.DoseInfo{Identifiers: withPlan, DoseSummationType: "FRACTION", ReferencedFractionGroupNumber: 1}, withPlan, "FRACTION", withPlan.ReferencedRTPlanUID},
		{"beam", &dicomio.DoseInfo{Identifiers: withPlan, DoseSummationType: "BEAM", ReferencedFractionGroupNumber: 1, ReferencedBeamNumber: 3}, withPlan, "BEAM", withPlan.ReferencedRTPlanUID},
		// References this writer does not carry: no plan, the map's own term.
		{"multi_plan", &dicomio.DoseInfo{Identifiers: withPlan, DoseSummationType: "MULTI_PLAN"}, withPlan, dicomio.MapSummationType, ""},
		{"beam_without_numbers", &dicomio.DoseInfo{Identifiers: withPlan, DoseSummationType: "BEAM"}, withPlan, dicomio.MapSummationType, ""},
	} {
		sum, fg, beam := dicomio.MapSummation(tc.ref)
		if sum != tc.sum {
			t.Errorf("%s: MapSummation %q, want %q", tc.name, sum, tc.sum)
		}
		for _, o := range []dicomio.WriteOptions{dicomio.GammaOptions("gamma index test"), dicomio.DifferenceOptions("dose difference test")} {
			o.DoseSummationType, o.ReferencedFractionGroupNumber, o.ReferencedBeamNumber = sum, fg, beam
			p := filepath.Join(dir, tc.name+"_"+map[bool]string{false: "gamma", true: "diff"}[o.Signed]+".dcm")
			info, err := dicomio.WriteDose(p, g, tc.ids, o)
			if err != nil {
				t.Fatalf("%s: %v", tc.name, err)
			}
			if info.DoseSummationType != tc.sum || info.ReferencedRTPlanUID != tc.plan {
				t.Errorf("%s: wrote %s with plan %q, want %s with %q", tc.name, info.DoseSummationType, info.ReferencedRTPlanUID, tc.sum, tc.plan)
			}
			files = append(files, file{p, tc.sum, tc.plan, o.Signed})
		}
	}
	// Without a plan and without a summation given, a map gets the map's
	// term; a dose (DoseType PHYSICAL) is refused rather than written as a
	// PLAN dose without its plan.
	if info, err := dicomio.WriteDose(filepath.Join(dir, "default.dcm"), g, noPlan, dicomio.GammaOptions("gamma")); err != nil || info.DoseSummationType != dicomio.MapSummationType {
		t.Errorf("default map summation without a plan: %v, %v", info, err)
	}
	for _, sum := range []string{"", "PLAN", "FRACTION", "MULTI_PLAN", "CONTROL_POINT", "RECORD"} {
		o := dicomio.DoseOptions("dose")
		o.DoseSummationType = sum
		if _, err := dicomio.WriteDose(filepath.Join(dir, "refused.dcm"), g, noPlan, o); err == nil {
			t.Errorf("DoseSummationType %q without a plan: written, want an error", sum)
		}
	}

	t.Run("dciodvfy", func(t *testing.T) {
		dciodvfy := requireTool(t, "dciodvfy")
		for _, f := range files {
			var allow []string
			if f.signed {
				// As in TestWriteDoseRoundTrip: PS3.3 allows signed
				// values for DoseType ERROR; Debian's dciodvfy (2022) does
				// not know it.
				allow = append(allow, "Error - Unrecognized enumerated value <0x1> for value 1 of attribute <Pixel Representation>")
			}
			dciodvfyAccepts(t, dciodvfy, f.name, "RTDose", allow...)
		}
	})
	t.Run("pydicom", func(t *testing.T) {
		var paths []string
		for _, f := range files {
			paths = append(paths, f.name)
		}
		for i, ref := range pydicomDoses(t, paths...) {
			if ref.Sum != files[i].wantSum || ref.Plan != files[i].wantPlan || ref.Type != "ERROR" {
				t.Errorf("%s: pydicom reads DoseSummationType %q, plan %q, DoseType %q; want %q, %q, ERROR",
					filepath.Base(files[i].name), ref.Sum, ref.Plan, ref.Type, files[i].wantSum, files[i].wantPlan)
			}
		}
	})
	// Read back, each says why it is no dose.
	for _, f := range files {
		info, err := dicomio.ReadDoseInfo(f.name)
		if err != nil {
			t.Fatal(err)
		}
		why := info.DisagreementMap()
		if !strings.Contains(why, "DoseType (3004,0004) is ERROR") || !strings.Contains(why, "voxgamma wrote") {
			t.Errorf("%s: DisagreementMap %q", filepath.Base(f.name), why)
		}
	}
}

// TestDoseOrigin: the words of the text attributes that say where a dose
// comes from, and those that must not (a "verification plan" is a planning
// system's plan on a phantom; "plan" alone is in every dose's name).
func TestDoseOrigin(t *testing.T) {
	for _, tc := range []struct {
		info dicomio.DoseInfo
		want dicomio.OriginKind
	}{
		{dicomio.DoseInfo{SeriesDescription: "demo planning dose, Gy"}, dicomio.OriginPlanning},
		{dicomio.DoseInfo{SeriesDescription: "TPS export"}, dicomio.OriginPlanning},
		{dicomio.DoseInfo{DoseComment: "Monte Carlo recalculation"}, dicomio.OriginIndependent},
		{dicomio.DoseInfo{SeriesDescription: "RD_MC_plan"}, dicomio.OriginIndependent},
		{dicomio.DoseInfo{Manufacturer: "Some Recalc Engine"}, dicomio.OriginIndependent},
		{dicomio.DoseInfo{SeriesDescription: "EPID reconstructed dose"}, dicomio.OriginIndependent},
		{dicomio.DoseInfo{SeriesDescription: "in-vivo transit dose"}, dicomio.OriginIndependent},
		{dicomio.DoseInfo{SeriesDescription: "TPS dose recalculated"}, dicomio.OriginUnknown},
		{dicomio.DoseInfo{SeriesDescription: "Plan dose"}, dicomio.OriginUnknown},
		{dicomio.DoseInfo{SeriesDescription: "verification plan QA"}, dicomio.OriginUnknown},
		{dicomio.DoseInfo{SeriesDescription: "MCO optimised"}, dicomio.OriginUnknown},
		{dicomio.DoseInfo{SeriesDescription: "ARC 1"}, dicomio.OriginUnknown},
	} {
		o := dicomio.DoseOrigin(&tc.info)
		if got := o.Kind(); got != tc.want {
			t.Errorf("%+v: origin %v (%v), want %v", tc.info, got, o, tc.want)
		}
	}
}

// TestSwapEvidence: a likely swap is said only when both files speak, and
// says which attributes did.
func TestSwapEvidence(t *testing.T) {
	plan := "2.25.1234"
	tps := &dicomio.DoseInfo{Path: "/x/tps.dcm", SeriesDescription: "TPS dose", Identifiers: dicomio.Identifiers{ReferencedRTPlanUID: plan}}
	mc := &dicomio.DoseInfo{Path: "/x/mc.dcm", DoseComment: "Monte Carlo recalculation", Identifiers: dicomio.Identifiers{ReferencedRTPlanUID: plan}}
	mcNoPlan := &dicomio.DoseInfo{Path: "/x/mc.dcm", DoseComment: "Monte Carlo recalculation"}
	silent := &dicomio.DoseInfo{Path: "/x/rd.dcm", SeriesDescription: "Dose", Identifiers: dicomio.Identifiers{ReferencedRTPlanUID: plan}}
	for _, tc := range []struct {
		name      string
		ref, eval *dicomio.DoseInfo
		want      []string // "" for none
	}{
		{"right_way_round", tps, mc, nil},
		{"swapped", mc, tps, []string{"reference (mc.dcm)", `DoseComment "Monte Carlo recalculation"`, "evaluated dose (tps.dcm)", `SeriesDescription "TPS dose"`}},
		{"swapped_plan_reference", mcNoPlan, silent, []string{"reference (mc.dcm)", "ReferencedRTPlanSequence (300C,0002) names RT Plan 2.25.1234"}},
		{"reference_alone_speaks", mc, silent, nil},
		{"evaluated_alone_speaks", silent, tps, nil},
		{"both_plans_referenced", mc, silent, nil},
		{"evaluated_speaks_both_ways", mc, &dicomio.DoseInfo{SeriesDescription: "TPS dose recalculated"}, nil},
	} {
		got := dicomio.SwapEvidence(tc.ref, tc.eval)
		if (got != "") != (tc.want != nil) {
			t.Errorf("%s: evidence %q, want it %v", tc.name, got, tc.want != nil)
		}
		for _, w := range tc.want {
			if !strings.Contains(got, w) {
				t.Errorf("%s: evidence %q does not name %q", tc.name, got, w)
			}
		}
	}
}

// TestChooseMapsAndRoles: a folder holding a plan dose, voxgamma's own maps
// of an earlier run and another DoseType ERROR dose: the maps are set aside
// with their reason and the plan dose chosen (before: "3 RT Dose files
// could be the plan dose"). Two plan doses whose words tell the planning
// system's from an independent one: each role gets its own; the file given
// for the other role is excluded.
func TestChooseMapsAndRoles(t *testing.T) {
	dir := t.TempDir()
	ids := dicomio.PhantomIdentifiers("", "")
	g := testGrid(t, orientations[0], frameSets["uniform"])
	write := func(name string, o dicomio.WriteOptions) string {
		p := filepath.Join(dir, name)
		if _, err := dicomio.WriteDose(p, g, ids, o); err != nil {
			t.Fatal(err)
		}
		return p
	}
	write("planning.dcm", dicomio.DoseOptions("planning system dose, Gy"))
	write("gamma.dcm", dicomio.GammaOptions("gamma index 3%/2mm global, unitless"))
	write("difference.dcm", dicomio.DifferenceOptions("dose difference evaluated-reference, Gy"))
	fo, err := dicomio.ScanFolder(dir)
	if err != nil {
		t.Fatal(err)
	}
	c, err := fo.Choose()
	if err != nil {
		t.Fatalf("a plan dose beside voxgamma's maps: %v", err)
	}
	if filepath.Base(c.Dose.Path) != "planning.dcm" {
		t.Fatalf("chose %s", c.Dose.Path)
	}
	for _, want := range []string{"ignored gamma.dcm: DoseType (3004,0004) is ERROR", "ignored difference.dcm: DoseType (3004,0004) is ERROR"} {
		if !hasLine(c.Account, want) {
			t.Errorf("account lacks %q:\n%s", want, c.Report())
		}
	}

	mc := write("mc.dcm", dicomio.DoseOptions("Monte Carlo recalculation, Gy"))
	fo, _ = dicomio.ScanFolder(dir)
	if _, err := fo.Choose(); err == nil || !strings.Contains(err.Error(), "2 RT Dose files") {
		t.Errorf("two plan doses, no role: %v", err)
	}
	for _, tc := range []struct {
		opt  dicomio.ChooseOptions
		want string
	}{
		{dicomio.ChooseOptions{Role: dicomio.ReferenceRole}, "planning.dcm"},
		{dicomio.ChooseOptions{Role: dicomio.EvaluatedRole}, "mc.dcm"},
		{dicomio.ChooseOptions{Exclude: []string{mc}, ExcludeRole: dicomio.EvaluatedRole}, "planning.dcm"},
	} {
		c, err := fo.ChooseFor(tc.opt)
		if err != nil || filepath.Base(c.Dose.Path) != tc.want {
			t.Errorf("%+v: chose %v (%v), want %s", tc.opt, c, err, tc.want)
			continue
		}
		if tc.opt.Role != dicomio.AnyRole && !hasLine(c.Account, "chose "+tc.want+" as the") {
			t.Errorf("%+v: the account does not say why:\n%s", tc.opt, c.Report())
		}
	}
	// Only maps: no dose, and the reasons.
	dir2 := t.TempDir()
	if _, err := dicomio.WriteDose(filepath.Join(dir2, "gamma.dcm"), g, ids, dicomio.GammaOptions("gamma index")); err != nil {
		t.Fatal(err)
	}
	fo, _ = dicomio.ScanFolder(dir2)
	if _, err := fo.Choose(); err == nil || !strings.Contains(err.Error(), "no usable RT Dose file") || !strings.Contains(err.Error(), "gamma.dcm: DoseType (3004,0004) is ERROR") {
		t.Errorf("a folder of maps: %v", err)
	}
}
