package job

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/deid"
	"voxgamma/dicomio"
	"voxgamma/protocol"
	"voxgamma/result"
)

func TestOutputsCheck(t *testing.T) {
	dir := t.TempDir()
	in := filepath.Join(dir, "ref.dcm")
	if err := os.WriteFile(in, []byte("x"), 0o644); err != nil {
		t.Fatal(err)
	}
	existing := filepath.Join(dir, "old.json")
	if err := os.WriteFile(existing, []byte("{}"), 0o644); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		o     Outputs
		force bool
		want  string // "" = accepted
	}{
		{Outputs{JSON: filepath.Join(dir, "r.json")}, false, ""},
		{Outputs{JSON: in}, true, "is an input file"},
		{Outputs{JSON: filepath.Join(dir, ".", "ref.dcm")}, true, "is an input file"},
		{Outputs{JSON: existing}, false, "exists"},
		{Outputs{JSON: existing}, true, ""},
		{Outputs{JSON: filepath.Join(dir, "a"), CSV: filepath.Join(dir, "a")}, false, "named twice"},
		{Outputs{GammaMap: filepath.Join(dir, "g.png")}, false, ".dcm"},
		{Outputs{DifferenceMap: filepath.Join(dir, "d.MHA")}, false, ""},
		{Outputs{Report: filepath.Join(dir, "missing", "r.html")}, false, "does not exist"},
		{Outputs{Report: dir}, true, "is a directory"},
	}
	for i, c := range cases {
		err := c.o.Check([]string{in}, c.force)
		switch {
		case c.want == "" && err != nil:
			t.Errorf("case %d: %v", i, err)
		case c.want != "" && (err == nil || !strings.Contains(err.Error(), c.want)):
			t.Errorf("case %d: error %v, want one containing %q", i, err, c.want)
		}
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 2 {
		t.Fatalf("Check left files behind: %d entries", len(entries))
	}
}

func TestDeidentifyResult(t *testing.T) {
	r := &result.Result{
		Inputs: []result.Input{{Role: "reference", Path: "/data/DOE_JANE/rd.dcm", PatientName: "DOE^JANE", PatientID: "123", SOPInstanceUID: "1.2.3"},
			{Role: "evaluated", Path: "/data/DOE_JANE/mc.dcm", PatientName: "DOE^JANE", PatientID: "124", Description: "QA DOE JANE"}},
		Warnings: []string{`patient IDs differ: reference (rd.dcm) "123", evaluated (mc.dcm) "124" (DOE^JANE)`},
		ROIs:     []result.ROI{{Name: "PTV_DOE", Status: "evaluated"}},
		Rules:    []result.RuleOutcome{{Rule: "every target", Subject: "PTV_DOE", Reason: "PTV_DOE below"}},
		Run:      result.Run{Started: "2026-12-01T10:00:00Z"},
	}
	d := deid.NewRun(deid.NewKey([]byte("0123456789abcdef-test"), "test")).Base()
	d.Path("/data/DOE_JANE/rd.dcm", "reference")
	d.Path("/data/DOE_JANE/mc.dcm", "evaluated")
	d.Identifiers(dicomio.Identifiers{PatientName: "DOE^JANE", PatientID: "123"})
	d.UID("1.2.3")
	d.PatientID("124")
	d.Text("QA DOE JANE", deid.Removed)
	DeidentifyResult(r, d)
	data, _ := json.Marshal(r)
	for _, leak := range []string{"DOE", "JANE", "123", "124", "2026", "rd.dcm", "1.2.3\""} {
		if strings.Contains(string(data), leak) {
			t.Errorf("de-identified result still holds %q: %s", leak, data)
		}
	}
	if r.Inputs[0].PatientID == r.Inputs[1].PatientID || r.Inputs[0].PatientName != r.Inputs[1].PatientName || r.Inputs[0].Path != "reference" {
		t.Fatal("pseudonyms must be stable per value and distinct for distinct values; paths become roles")
	}
}

func TestSettingsOverrides(t *testing.T) {
	p, _ := protocol.Preset("tg218")
	local := true
	thr, nd := 5.0, 2.0
	s, err := Settings(p, Overrides{Criteria: "2%/1mm", Local: &local, Threshold: &thr, NormDose: &nd})
	if err != nil {
		t.Fatal(err)
	}
	c := s.Criteria
	if c.DosePercent != 2 || c.DTA != 1 || c.Normalisation.String() != "local" || c.ThresholdPercent != 5 || c.NormDose != 2 || s.NormDoseSource != "user" {
		t.Fatalf("criteria %+v source %s", c, s.NormDoseSource)
	}
	bad := -1.0
	for _, ov := range []Overrides{{Criteria: "3/2"}, {Threshold: &bad}, {NormDose: &bad}, {Search: &bad}, {KindRules: []string{"PTV*=tumour"}}, {Isodose: []float64{120}}, {Workers: -2}} {
		if _, err := Settings(p, ov); err == nil {
			t.Errorf("overrides %+v accepted", ov)
		}
	}
}

// TestSettingsInputChecks: the protocol's inputs section reaches the
// analysis settings (issue 11, items 7 and 11); the defaults are a warning
// for swapped doses and a refusal for differing dose types.
func TestSettingsInputChecks(t *testing.T) {
	for _, tc := range []struct {
		yaml                   string
		refuseSwap, allowTypes bool
	}{
		{"", false, false},
		{"inputs: {swapped_doses: error}\n", true, false},
		{"inputs: {dose_type_mismatch: warn, swapped_doses: warn}\n", false, true},
	} {
		p, err := protocol.Parse([]byte("name: x\ncriteria: {criteria: 3%/2mm}\nrules: [{subject: overall, metric: pass_rate, op: '>=', limit: 95}]\n"+tc.yaml), "x.yaml")
		if err != nil {
			t.Fatal(err)
		}
		s, err := Settings(p, Overrides{})
		if err != nil {
			t.Fatal(err)
		}
		if s.RefuseSwappedDoses != tc.refuseSwap || s.AllowDoseTypeMismatch != tc.allowTypes {
			t.Errorf("%q: refuse swapped %v, allow dose types %v", tc.yaml, s.RefuseSwappedDoses, s.AllowDoseTypeMismatch)
		}
	}
	if _, err := protocol.Parse([]byte("name: x\ncriteria: {criteria: 3%/2mm}\nrules: [{subject: overall, metric: pass_rate, op: '>=', limit: 95}]\ninputs: {swapped_doses: maybe}\n"), "x.yaml"); err == nil ||
		!strings.Contains(err.Error(), "x.yaml:4: inputs.swapped_doses: \"maybe\": want warn or error") {
		t.Errorf("a bad value: %v", err)
	}
}
