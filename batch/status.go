package batch

import (
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"

	"voxgamma/internal/atomicfile"
	"voxgamma/result"
)

// StatusSchemaVersion is the version of the status.json layout. 1.1: a
// de-identified status gives each input's role as its path and no finish
// time; resume compares inputs by role and content only.
const StatusSchemaVersion = "1.1"

// StatusFile is the name of the case-status file in each case folder.
const StatusFile = "status.json"

// Verdicts of a case.
const (
	// VerdictPass: evaluated, every rule of the protocol met.
	VerdictPass = "pass"
	// VerdictFail: evaluated, a rule not met.
	VerdictFail = "fail"
	// VerdictError: could not be evaluated.
	VerdictError = "error"
)

// Exit classes of a case and of a batch: the exit statuses of compare.
const (
	ExitPass     = 0 // evaluated, every rule met
	ExitError    = 1 // could not be evaluated
	ExitRuleFail = 2 // evaluated, a rule not met
)

// Status is a case folder's status.json: what was compared, with which
// settings, and how it ended. It is written last, into the case's temporary
// folder, before the folder is renamed into place.
type Status struct {
	// SchemaVersion is [StatusSchemaVersion].
	SchemaVersion string `json:"schema_version"`
	// ID is the case id (the folder's name).
	ID string `json:"id"`
	// Inputs are the input files with their SHA-256 (see [HashInputs]).
	Inputs []InputHash `json:"inputs"`
	// Protocol is the protocol file or preset the case used.
	Protocol string `json:"protocol"`
	// SettingsSHA256 is [SettingsHash] of the case's settings.
	SettingsSHA256 string `json:"settings_sha256"`
	// Verdict is "pass", "fail" or "error".
	Verdict string `json:"verdict"`
	// ExitClass is 0 (pass), 2 (a rule not met) or 1 (could not evaluate).
	ExitClass int `json:"exit_class"`
	// Error says why the case could not be evaluated; empty otherwise.
	Error string `json:"error"`
	// Seconds is the wall time of the case.
	Seconds float64 `json:"seconds"`
	// Runs counts the times the case was computed into this folder (1 the
	// first time; a resumed batch that skips the case leaves it as is).
	Runs int `json:"runs"`
	// Finished is when the case ended, RFC 3339 UTC.
	Finished string `json:"finished"`
	// Outputs are the files written in the case folder besides this one.
	Outputs []string `json:"outputs"`
	// Summary holds the figures of the batch summary; nil for an error.
	Summary *CaseFigures `json:"summary"`
	// WatchKey is the fingerprint of the watched files the case was made
	// from (watch only).
	WatchKey string `json:"watch_key,omitempty"`
}

// ROIRate is an ROI's gamma pass rate.
type ROIRate struct {
	// Name of the ROI as in the structure set.
	Name string `json:"name"`
	// PassRate in percent, null when nothing was evaluated.
	PassRate *float64 `json:"pass_rate"`
	// PassRateText has one decimal, rounded down ("n/a" when null).
	PassRateText string `json:"pass_rate_text"`
}

// CaseFigures are the figures of a finished case that the summary shows.
type CaseFigures struct {
	// OverallPassRate over every evaluated point (percent; null when none).
	OverallPassRate     *float64 `json:"overall_pass_rate"`
	OverallPassRateText string   `json:"overall_pass_rate_text"`
	// Targets are the target ROIs of the structure set, in file order.
	Targets []ROIRate `json:"targets"`
	// WorstROI is the structure-set ROI with the lowest pass rate (the
	// first in file order among equals); nil when none was evaluated.
	WorstROI *ROIRate `json:"worst_roi"`
	// RulesFailed counts the rule checks not met.
	RulesFailed int `json:"rules_failed"`
}

// Figures extracts the summary figures of a result.
func Figures(r *result.Result) *CaseFigures {
	f := &CaseFigures{OverallPassRate: r.Overall.PassRate, OverallPassRateText: r.Overall.PassRateText, Targets: []ROIRate{}}
	for _, x := range r.ROIs {
		if x.Source != "structure set" {
			continue
		}
		rate := ROIRate{Name: x.Name, PassRate: x.PassRate, PassRateText: x.PassRateText}
		if x.Kind == "target" {
			f.Targets = append(f.Targets, rate)
		}
		if x.PassRate != nil && (f.WorstROI == nil || *x.PassRate < *f.WorstROI.PassRate) {
			w := rate
			f.WorstROI = &w
		}
	}
	for _, o := range r.Rules {
		if o.Outcome == result.NotMet {
			f.RulesFailed++
		}
	}
	return f
}

// ReadStatus reads dir/status.json.
func ReadStatus(dir string) (*Status, error) {
	path := filepath.Join(dir, StatusFile)
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	var s Status
	if err := json.Unmarshal(data, &s); err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	if s.Verdict != VerdictPass && s.Verdict != VerdictFail && s.Verdict != VerdictError {
		return nil, fmt.Errorf("reading %s: verdict %q is none of pass, fail, error", path, s.Verdict)
	}
	return &s, nil
}

// writeStatus writes dir/status.json atomically.
func writeStatus(dir string, s *Status) error {
	data, err := json.MarshalIndent(s, "", "  ")
	if err != nil {
		return fmt.Errorf("case %s: encoding status: %w", s.ID, err)
	}
	return atomicfile.WriteBytes(filepath.Join(dir, StatusFile), append(data, '\n'))
}
