package batch

import (
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"

	"voxgamma/analysis"
	"voxgamma/protocol"
)

// InputHash records one input of a case and the SHA-256 of its content.
type InputHash struct {
	// Role is "reference", "evaluated" or "structures".
	Role string `json:"role"`
	// Path as resolved from the manifest (absolute); the role alone when
	// de-identified. Resume compares roles and hashes, not paths.
	Path string `json:"path"`
	// SHA256 of the file's bytes, hex; for a folder, of its listing of
	// regular files (name and SHA-256 of each, sorted by name).
	SHA256 string `json:"sha256"`
	// Folder is true when Path is a folder.
	Folder bool `json:"folder,omitempty"`
}

// FileSHA256 returns the hex SHA-256 of the file's bytes.
func FileSHA256(path string) (string, error) {
	f, err := os.Open(path)
	if err != nil {
		return "", err
	}
	defer f.Close()
	h := sha256.New()
	if _, err := io.Copy(h, f); err != nil {
		return "", fmt.Errorf("reading %s: %w", path, err)
	}
	return hex.EncodeToString(h.Sum(nil)), nil
}

// hashPath hashes a file, or a folder's regular files (not its
// subfolders, which the comparison does not read).
func hashPath(path string) (sum string, folder bool, err error) {
	st, err := os.Stat(path)
	if err != nil {
		return "", false, err
	}
	if !st.IsDir() {
		sum, err = FileSHA256(path)
		return sum, false, err
	}
	entries, err := os.ReadDir(path)
	if err != nil {
		return "", true, err
	}
	names := make([]string, 0, len(entries))
	for _, e := range entries {
		if e.Type().IsRegular() {
			names = append(names, e.Name())
		}
	}
	sort.Strings(names)
	h := sha256.New()
	for _, n := range names {
		s, err := FileSHA256(filepath.Join(path, n))
		if err != nil {
			return "", true, err
		}
		fmt.Fprintf(h, "%s\x00%s\n", n, s)
	}
	return hex.EncodeToString(h.Sum(nil)), true, nil
}

// HashInputs returns the SHA-256 of each input of c, in the order
// reference, evaluated, structures (when given). Errors name the case and
// the file.
func HashInputs(c Case) ([]InputHash, error) {
	var out []InputHash
	for _, in := range c.roleInputs() {
		if in[1] == "" {
			continue
		}
		sum, folder, err := hashPath(in[1])
		if err != nil {
			var pe *os.PathError
			if errors.As(err, &pe) && pe.Path == in[1] {
				err = pe.Err
			}
			return nil, fmt.Errorf("case %s: %s %s: %w", c.ID, in[0], in[1], err)
		}
		out = append(out, InputHash{Role: in[0], Path: in[1], SHA256: sum, Folder: folder})
	}
	if c.NoStructures {
		// Deliberately none: a change to or from it must rerun the case.
		out = append(out, InputHash{Role: "structures", Path: NoStructuresWord, SHA256: NoStructuresWord})
	}
	return out, nil
}

// sameInputs reports whether two lists name the same inputs by role and
// content (SHA-256, file or folder), whatever their paths: a study moved
// to another disk, or a de-identified status that records no paths, still
// resumes.
func sameInputs(a, b []InputHash) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i].Role != b[i].Role || a[i].SHA256 != b[i].SHA256 || a[i].Folder != b[i].Folder {
			return false
		}
	}
	return true
}

// settingsKey is everything besides the input files that changes a case's
// outputs, in a fixed field order: its JSON encoding is canonical (struct
// fields in declaration order, numbers in their shortest form).
type settingsKey struct {
	Format             string             `json:"format"`
	Version            string             `json:"version"`
	Protocol           *protocol.Protocol `json:"protocol"`
	DosePercent        float64            `json:"dose_percent"`
	DTA                float64            `json:"dta_mm"`
	Normalisation      string             `json:"normalisation"`
	NormDose           float64            `json:"norm_dose_gy"`
	NormDoseSource     string             `json:"norm_dose_source"`
	ThresholdPercent   float64            `json:"threshold_percent"`
	Search             float64            `json:"search_mm"`
	Method             string             `json:"method"`
	Interpolation      string             `json:"interpolation"`
	KindRules          []string           `json:"kind_rules"`
	Isodose            []float64          `json:"isodose"`
	VDoses             []float64          `json:"v_doses"`
	SubGrid            []string           `json:"subgrid"`
	SubGridStep        float64            `json:"subgrid_step"`
	MinClusterCC       float64            `json:"min_cluster_cc"`
	GammaMap           bool               `json:"gamma_map"`
	DifferenceMap      bool               `json:"difference_map"`
	Report             bool               `json:"report"`
	ReportPDF          bool               `json:"report_pdf,omitempty"`
	Deidentify         bool               `json:"deidentify"`
	AllowFrameMismatch bool               `json:"allow_frame_mismatch"`
	NoStructures       bool               `json:"no_structures"`
	AcceptNormDose     bool               `json:"accept_norm_dose"`
	ScaleEvaluated     string             `json:"scale_evaluated,omitempty"`
	// DeidentifyKey is deid.Key.ID: a new site key reruns a case; random
	// keys ("per-run") do not.
	DeidentifyKey  string  `json:"deidentify_key,omitempty"`
	NoiseHandling  string  `json:"noise_handling"`
	NoisePercent   float64 `json:"noise_percent"`
	NoiseJudgesRaw bool    `json:"noise_judges_raw"`
}

// SettingsHash returns the hex SHA-256 of the canonical JSON of everything
// that decides a case's outputs besides its input files: the voxgamma
// version, the protocol's content (not its file name), the criteria, ROI
// rules and other analysis settings as resolved, and the output options.
// The worker count is left out: results do not depend on it.
func SettingsHash(p *protocol.Protocol, s analysis.Settings, o Outputs, allowFrameMismatch bool) (string, error) {
	k := settingsKey{
		Format: "voxgamma-batch-settings/1", Version: s.Version, Protocol: p,
		DosePercent: s.Criteria.DosePercent, DTA: s.Criteria.DTA, Normalisation: s.Criteria.Normalisation.String(),
		NormDose: s.Criteria.NormDose, NormDoseSource: s.NormDoseSource, ThresholdPercent: s.Criteria.ThresholdPercent,
		Search: s.Criteria.Search, Method: s.Method.String(), Interpolation: s.Interpolation.String(), Isodose: s.IsodosePercents, VDoses: s.VDoses,
		SubGrid: s.SubGridROIs, SubGridStep: s.SubGridStep, MinClusterCC: s.MinClusterCC,
		GammaMap: o.GammaMap, DifferenceMap: o.DifferenceMap, Report: o.Report, ReportPDF: o.ReportPDF, Deidentify: o.Deidentify,
		AllowFrameMismatch: allowFrameMismatch, NoStructures: s.Choices.NoStructures, AcceptNormDose: s.AcceptNormDose,
		ScaleEvaluated: s.ScaleEvaluated.Given,
		NoiseHandling:  s.Noise.Handling.String(), NoisePercent: s.Noise.Percent, NoiseJudgesRaw: s.Noise.JudgeRaw,
	}
	if o.Deidentify {
		k.DeidentifyKey = o.KeyID
	}
	for _, r := range s.KindRules {
		k.KindRules = append(k.KindRules, r.String())
	}
	data, err := json.Marshal(k)
	if err != nil {
		return "", fmt.Errorf("hashing settings: %w", err)
	}
	sum := sha256.Sum256(data)
	return hex.EncodeToString(sum[:]), nil
}
