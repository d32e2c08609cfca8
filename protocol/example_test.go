package protocol_test

import (
	"fmt"
	"log"

	"voxgamma/protocol"
	"voxgamma/result"
)

// Load a clinic's protocol file and show what it checks.
func ExampleLoad() {
	p, err := protocol.Load("testdata/example.yaml")
	if err != nil {
		log.Fatal(err)
	}
	c, err := p.GammaCriteria()
	if err != nil {
		log.Fatal(err)
	}
	fmt.Printf("%s: %s, threshold %g %%, search %g mm\n", p.Name, c.Label(), c.ThresholdPercent, c.SearchRadius())
	for _, r := range p.Rules {
		fmt.Printf("%-9s %s\n", r.Level, r)
	}
	// Output:
	// example-vmat: 3%/2mm global, threshold 10 %, search 6 mm
	// tolerance overall: pass rate ≥ 95 %
	// action    overall: pass rate ≥ 90 %
	// tolerance each target: pass rate ≥ 95 %
	// tolerance |ΔD95| of each target ≤ 3 %
	// tolerance each organ at risk: Γ 95th percentile ≤ 1
	// action    ΔD0.03cc of ROI "SpinalCord" ≤ 0.5 Gy
	// tolerance the 50 % isodose: mean Γ ≤ 0.5
}

// Check a comparison result against the TG-218 preset.
func ExamplePreset() {
	p, _ := protocol.Preset("tg218")
	pass := func(v float64) *float64 { return &v }
	r := &result.Result{
		Overall: result.GammaStats{Evaluated: 250000, PassRate: pass(97.31), CoveragePercent: pass(100)},
		ROIs: []result.ROI{
			{Name: "PTV_60", Kind: "target", Source: "structure set", Status: "evaluated",
				GammaStats: result.GammaStats{PassRate: pass(99.2)}},
			{Name: "PTV_boost", Kind: "target", Source: "structure set", Status: "evaluated",
				GammaStats: result.GammaStats{PassRate: pass(93.4)}},
			{Name: "Rectum", Kind: "oar", Source: "structure set", Status: "evaluated",
				GammaStats: result.GammaStats{PassRate: pass(88.0)}},
		},
	}
	outcomes, verdict := p.Evaluate(r)
	for _, o := range outcomes {
		line := fmt.Sprintf("%-9s %-9s %-29s %s %s", o.Level, o.Subject, o.Rule, o.ValueText, o.Outcome)
		if o.Reason != "" {
			line += " (" + o.Reason + ")"
		}
		fmt.Println(line)
	}
	fmt.Println("verdict:", verdict)
	// The preset has no rule on organs at risk, so Rectum is not checked.

	// Output:
	// action    overall   overall: coverage ≥ 99.5 %    100.00 met
	// tolerance overall   overall: pass rate ≥ 95 %     97.31 met
	// action    overall   overall: pass rate ≥ 90 %     97.31 met
	// tolerance PTV_60    each target: pass rate ≥ 95 % 99.20 met
	// tolerance PTV_boost each target: pass rate ≥ 95 % 93.40 not met (measured 93.40 %, not ≥ 95 %)
	// verdict: fail
}
