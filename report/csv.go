package report

import (
	"encoding/csv"
	"fmt"
	"io"
	"math"
	"slices"
	"strconv"

	"voxgamma/internal/atomicfile"
	"voxgamma/internal/safetext"
	"voxgamma/result"
)

// csvHeader lists the columns of the CSV table, in order.
var csvHeader = []string{
	"name", "kind", "source", "volume_cc", "voxels", "evaluated", "passed", "pass_rate",
	"gamma_mean", "gamma_p95", "gamma_max", "failing_volume_cc", "status",
	"coverage_percent", "covered_percent",
	"ref_mean_gy", "eval_mean_gy", "ref_d95_gy", "eval_d95_gy", "diff_d95_percent",
	"ref_d2_gy", "eval_d2_gy", "diff_d2_percent",
	"raw_pass_rate", "raw_gamma_mean", "noise_warning",
}

// csvStatus is the index of the status column.
var csvStatus = slices.Index(csvHeader, "status")

// CSVColumns returns the names of the CSV table's columns, in order.
func CSVColumns() []string { return append([]string(nil), csvHeader...) }

// EncodeCSV writes the CSV table of r to w: a header row ([CSVColumns]), a row
// named "overall" with the statistics over every evaluated point, then one
// row per ROI in the result's order, then one row per warning of the result
// (name "warning", the warning in the status column). A number that does not exist (null in
// the JSON, or a column that does not apply to the overall row) is an empty
// cell. Numbers are written in the shortest form that reads back to the same
// float64, except the percentages of points and volume (pass_rate,
// coverage_percent, covered_percent), which follow the one display rule of
// every output: rounded down to the digits shown (two decimals), never 100
// unless every point passed (result.FormatPercent). The exact values are in
// the JSON. Text cells (names, kinds, statuses) that a spreadsheet would
// read as a formula get a leading apostrophe (see safetext.CSVCell).
// With a noise correction, pass_rate and the Γ columns are the corrected
// figures and raw_pass_rate and raw_gamma_mean those against the evaluated
// dose as given (empty without a correction); noise_warning holds, on the
// overall row and on each ROI whose pass rate the noise moves by more than
// 1 percentage point, the warning with σ and both pass rates.
func EncodeCSV(w io.Writer, r *result.Result) error {
	if r == nil {
		return fmt.Errorf("report: encoding CSV: no result")
	}
	cw := csv.NewWriter(w)
	rows := make([][]string, 0, len(r.ROIs)+2)
	rows = append(rows, csvHeader)
	o := r.Overall
	n := r.Noise
	corrected := n != nil && n.Corrected
	// noiseCells returns the raw figures and the warning of one row.
	noiseCells := func(raw *result.GammaStats, subject, corrText string, corr *float64) []string {
		if !corrected || raw == nil {
			return []string{"", "", ""}
		}
		warning := ""
		if n.Warning && (subject == "overall" || shiftPP(corr, raw.PassRate) > noiseWarningPP) {
			warning = noiseWarningText(n, subject, raw.PassRateText, corrText)
		}
		return []string{csvPercent(raw.PassRate), csvNum(raw.GammaMean), safetext.CSVCell(warning)}
	}
	var rawOverall *result.GammaStats
	if n != nil {
		rawOverall = &n.RawOverall
	}
	rows = append(rows, append([]string{
		"overall", "", "", "", "",
		strconv.Itoa(o.Evaluated), strconv.Itoa(o.Passed), csvPercent(o.PassRate),
		csvNum(o.GammaMean), csvNum(o.GammaP95), csvNum(o.GammaMax), "", "",
		csvPercent(o.CoveragePercent), "",
		"", "", "", "", "", "", "", "",
	}, noiseCells(rawOverall, "overall", o.PassRateText, o.PassRate)...))
	for i, roi := range r.ROIs {
		var dvh result.DVHPair
		if roi.DVH != nil {
			dvh = *roi.DVH
		}
		var raw *result.GammaStats
		if n != nil && i < len(n.ROIs) {
			raw = &n.ROIs[i].GammaStats
		}
		rows = append(rows, append([]string{
			safetext.CSVCell(roi.Name), safetext.CSVCell(roi.Kind), safetext.CSVCell(roi.Source), csvFloat(roi.VolumeCC), strconv.Itoa(roi.Voxels),
			strconv.Itoa(roi.Evaluated), strconv.Itoa(roi.Passed), csvPercent(roi.PassRate),
			csvNum(roi.GammaMean), csvNum(roi.GammaP95), csvNum(roi.GammaMax),
			csvFloat(roi.FailingVolumeCC), safetext.CSVCell(statusText(roi)),
			csvPercent(roi.CoveragePercent), csvPercent(roi.CoveredPercent),
			csvNum(dvh.Reference.MeanGy), csvNum(dvh.Evaluated.MeanGy),
			csvNum(dvh.Reference.D95Gy), csvNum(dvh.Evaluated.D95Gy), csvNum(dvh.DifferencePercent.D95Gy),
			csvNum(dvh.Reference.D2Gy), csvNum(dvh.Evaluated.D2Gy), csvNum(dvh.DifferencePercent.D2Gy),
		}, noiseCells(raw, roi.Name, roi.PassRateText, roi.PassRate)...))
	}
	// Warnings come last, one row each: name "warning", the text in the
	// status column, every other cell empty. A table read on its own must
	// not lose what the result warns about (a likely swap of the doses, an
	// ROI whose contours overlap, ...).
	for _, w := range r.Warnings {
		row := make([]string, len(csvHeader))
		row[0], row[csvStatus] = "warning", w
		rows = append(rows, row)
	}
	if err := cw.WriteAll(rows); err != nil {
		return fmt.Errorf("report: encoding CSV: %w", err)
	}
	return nil
}

// WriteCSV writes the CSV table of r (see [EncodeCSV]) to the file at path,
// atomically.
func WriteCSV(path string, r *result.Result) error {
	if err := atomicfile.Write(path, func(w io.Writer) error { return EncodeCSV(w, r) }); err != nil {
		return fmt.Errorf("report: CSV: %w", err)
	}
	return nil
}

// noiseWarningPP is the pass-rate change (percentage points) from which a
// row carries the noise warning (analysis.ShiftWarningPP; report does not
// import analysis).
const noiseWarningPP = 1.0

// shiftPP returns |a − b| for two nullable pass rates (0 when either is
// null).
func shiftPP(a, b *float64) float64 {
	if a == nil || b == nil {
		return 0
	}
	return math.Abs(*a - *b)
}

// noiseWarningText is the noise warning of one subject (overall or an
// ROI): σ, its source, and the raw and corrected pass rates side by side.
func noiseWarningText(n *result.Noise, subject, raw, corrected string) string {
	sigma := "unknown"
	if n.SigmaPercent != nil {
		sigma = strconv.FormatFloat(*n.SigmaPercent, 'g', 3, 64) + " %"
	}
	return fmt.Sprintf("Monte Carlo noise σ %s at the evaluated maximum (%s) moves pass rates: %s raw %s %%, corrected %s %%; the rules judged the %s figures",
		sigma, n.Source, subject, raw, corrected, n.Judged)
}

// csvNum formats a nullable number; nil (and NaN, which a result should
// never hold) is the empty cell.
func csvNum(p *float64) string {
	if p == nil {
		return ""
	}
	return csvFloat(*p)
}

// csvPercent writes a percentage by the display rule, empty when null.
func csvPercent(p *float64) string {
	if p == nil {
		return ""
	}
	return result.FormatPercent(*p, 2)
}

func csvFloat(v float64) string {
	if v != v {
		return ""
	}
	return strconv.FormatFloat(v, 'f', -1, 64)
}
