// Package result defines the machine-readable outcome of one voxgamma
// comparison: the document written as JSON for a check pipeline, and the one
// source of truth the CSV table and the HTML review page are made from.
//
// The field names are a contract with pipelines (see README "JSON result").
// Numbers that do not exist (a pass rate when nothing was evaluated, a Γ
// statistic of an empty set) are null, never 0 and never NaN. Fields that
// change from run to run on the same inputs (timestamp, timing, worker
// count) are kept apart in Run, so that the rest is byte-identical.
package result

// SchemaVersion is the version of this document's layout. It changes its
// major number when a field is removed or changes meaning, its minor number
// when fields are added.
const SchemaVersion = "1.1"

// Result is the whole outcome of one comparison.
type Result struct {
	// SchemaVersion is [SchemaVersion].
	SchemaVersion string `json:"schema_version"`
	// Version is the voxgamma version that produced the result.
	Version string `json:"version"`
	// Caution is the statement every output carries: a verification aid
	// for qualified physicists; local protocols decide.
	Caution string `json:"caution"`
	// Criteria as applied.
	Criteria Criteria `json:"criteria"`
	// Overall is Γ over every evaluated reference point.
	Overall GammaStats `json:"overall"`
	// ROIs holds the per-structure results, structures first in file
	// order, then the derived ROIs ("all targets", isodose regions).
	ROIs []ROI `json:"rois"`
	// Clusters lists connected failing regions, largest first.
	Clusters []Cluster `json:"failing_clusters"`
	// Noise is the evaluated dose's statistical noise and what was done
	// about it; null when noise handling was off. When Noise.Corrected,
	// Overall, ROIs and Clusters hold the figures of the corrected
	// comparison and Noise the raw ones.
	Noise *Noise `json:"noise"`
	// Verdict is "pass" when every rule of the protocol was met, "fail"
	// otherwise.
	Verdict string `json:"verdict"`
	// Protocol is the protocol used, in full.
	Protocol any `json:"protocol"`
	// Rules lists every rule checked and its outcome.
	Rules []RuleOutcome `json:"rules"`
	// Warnings are things a physicist must know (summation types differ,
	// part of the reference outside the evaluated grid, ...).
	Warnings []string `json:"warnings"`
	// Notes say how the numbers were obtained (partial-volume rule,
	// sub-grid evaluation, ROIs not rasterised, ...).
	Notes []string `json:"notes"`
	// Choices records the options besides the protocol that changed how
	// the rules were judged.
	Choices Choices `json:"choices"`
	// Inputs describes each input file.
	Inputs []Input `json:"inputs"`
	// DoseSums describes each dose made by summing several RT Dose files
	// (the beams of a plan, its fraction groups, sessions); omitted when
	// every dose was one file.
	DoseSums []DoseSum `json:"dose_sums,omitempty"`
	// Plan is the treatment plan the doses belong to, as its RT Plan file
	// says; nil (omitted) when no plan was given or found.
	Plan *Plan `json:"plan,omitempty"`
	// Run holds what varies between runs on the same inputs.
	Run Run `json:"run"`
}

// Criteria are the gamma criteria as applied.
type Criteria struct {
	DosePercent float64 `json:"dose_percent"`
	DTAmm       float64 `json:"dta_mm"`
	// Normalisation is "global" or "local".
	Normalisation string `json:"normalisation"`
	// NormDoseGy is the dose the global criterion and the threshold are
	// percentages of.
	NormDoseGy float64 `json:"norm_dose_gy"`
	// NormDoseSource says where NormDoseGy came from: "reference maximum",
	// "prescription", "user".
	NormDoseSource   string  `json:"norm_dose_source"`
	ThresholdPercent float64 `json:"threshold_percent"`
	SearchMM         float64 `json:"search_mm"`
	// Method is "fast" or "exhaustive".
	Method string `json:"method"`
	// Interpolation names the evaluated dose between its grid nodes:
	// "cubic-bspline", "trilinear" or "linear-simplex".
	Interpolation string `json:"interpolation"`
	// Label is the criteria in the trade's notation, e.g. "3%/2mm global".
	Label string `json:"label"`
}

// GammaStats summarises Γ over a set of reference points.
type GammaStats struct {
	// Evaluated counts points with a Γ (including capped points).
	Evaluated int `json:"evaluated"`
	// Passed counts points with Γ ≤ 1.
	Passed int `json:"passed"`
	// PassRate is 100·Passed/Evaluated, null when nothing was evaluated.
	PassRate *float64 `json:"pass_rate"`
	// PassRateText is the pass rate with one decimal, rounded down
	// ("99.9", never "100.0" unless all passed), or "n/a".
	PassRateText string   `json:"pass_rate_text"`
	GammaMean    *float64 `json:"gamma_mean"`
	GammaMedian  *float64 `json:"gamma_median"`
	GammaP95     *float64 `json:"gamma_p95"`
	GammaP99     *float64 `json:"gamma_p99"`
	GammaMax     *float64 `json:"gamma_max"`
	// AboveOneHalfPercent is the percentage of evaluated points with Γ > 1.5.
	AboveOneHalfPercent *float64 `json:"gamma_above_1_5_percent"`
	// CoveragePercent is the percentage of the reference points at or
	// above the threshold that were compared: Evaluated / (Evaluated +
	// OutsideEvaluated) × 100; null when there is no such point.
	CoveragePercent *float64 `json:"coverage_percent"`
	// Capped counts points with no agreement within the search distance.
	Capped int `json:"capped_at_search"`
	// BelowThreshold counts points under the low-dose threshold.
	BelowThreshold int `json:"below_threshold"`
	// OutsideEvaluated counts points outside the evaluated grid.
	OutsideEvaluated int `json:"outside_evaluated"`
}

// ROI is the outcome for one region of interest.
type ROI struct {
	Name string `json:"name"`
	// Number is the ROI number in the structure set; 0 for derived ROIs.
	Number int `json:"number"`
	// Kind is "target", "oar", "body" or "other".
	Kind string `json:"kind"`
	// InterpretedType is the RTROIInterpretedType as written, if any.
	InterpretedType string `json:"interpreted_type"`
	// Source is "structure set", "derived" or "isodose".
	Source string `json:"source"`
	// VolumeCC is the partial-volume-weighted volume on the dose grid.
	VolumeCC float64 `json:"volume_cc"`
	// Voxels counts the reference voxels whose centre is inside.
	Voxels int `json:"voxels"`
	GammaStats
	// FailingVolumeCC is the volume of the failing voxels.
	FailingVolumeCC float64 `json:"failing_volume_cc"`
	// WorstCentroidMM is the centroid of the failing voxels in patient
	// coordinates, null when none fails.
	WorstCentroidMM *[3]float64 `json:"failing_centroid_mm"`
	// CoveredPercent is the part of the ROI's volume (as its contours
	// enclose it) that lies inside both dose grids, in percent: the part of
	// the ROI the comparison could look at. Null for an ROI without volume.
	CoveredPercent *float64 `json:"covered_percent"`
	// KindSource says where Kind came from: "interpreted type", a name rule
	// ("protocol rule PTV*=target", "command-line rule PTV*=target") or
	// "derived".
	KindSource string `json:"kind_source"`
	// Status is StatusEvaluated, or why the ROI was not evaluated (one of
	// the ROIStatus constants); StatusDetail adds specifics where there are
	// any (e.g. why no contour could be rasterised).
	Status       ROIStatus `json:"status"`
	StatusDetail string    `json:"status_detail,omitempty"`
	// SubGridMM is the step of the finer reference sub-grid the ROI was
	// evaluated on, null when evaluated on the reference voxels.
	SubGridMM *float64 `json:"subgrid_mm"`
	// DVH holds dose-volume metrics of both doses and their differences.
	DVH *DVHPair `json:"dvh"`
}

// DVHPair holds the dose-volume metrics of reference and evaluated dose
// over one ROI and their differences (evaluated − reference).
type DVHPair struct {
	Reference DVHStats `json:"reference"`
	Evaluated DVHStats `json:"evaluated"`
	// DifferenceGy is evaluated − reference for each metric, in Gy.
	DifferenceGy DVHStats `json:"difference_gy"`
	// DifferencePercent is the difference in percent of the reference
	// value of each metric.
	DifferencePercent DVHStats `json:"difference_percent"`
	// Curves are the cumulative DVHs, for plotting.
	Curves *DVHCurves `json:"curves,omitempty"`
}

// DVHStats are the dose-volume metrics of one dose over one ROI (ICRU Report
// 83 definitions: D_x is the minimum dose to the hottest x of the volume).
type DVHStats struct {
	MeanGy    *float64 `json:"mean_gy"`
	MaxGy     *float64 `json:"max_gy"`
	MinGy     *float64 `json:"min_gy"`
	D98Gy     *float64 `json:"d98_gy"`
	D95Gy     *float64 `json:"d95_gy"`
	D50Gy     *float64 `json:"d50_gy"`
	D2Gy      *float64 `json:"d2_gy"`
	D003ccGy  *float64 `json:"d0_03cc_gy"`
	VolumeAtD []VAt    `json:"v,omitempty"`
}

// VAt is the volume receiving at least a dose.
type VAt struct {
	DoseGy  float64  `json:"dose_gy"`
	CC      *float64 `json:"cc"`
	Percent *float64 `json:"percent"`
}

// DVHCurves are cumulative DVHs sampled at common dose bins.
type DVHCurves struct {
	// DoseGy are the bin doses.
	DoseGy []float64 `json:"dose_gy"`
	// ReferencePercent and EvaluatedPercent are the percentages of the ROI
	// volume receiving at least each bin dose.
	ReferencePercent []float64 `json:"reference_percent"`
	EvaluatedPercent []float64 `json:"evaluated_percent"`
}

// Noise describes the evaluated dose's statistical noise (1σ) and its
// correction.
type Noise struct {
	// Handling is "auto" (estimated from the evaluated dose), "given" (a
	// value from the user or the protocol) or "map" (a per-voxel map).
	Handling string `json:"handling"`
	// Source is where SigmaPercent comes from: "estimated", "given" or
	// "map"; empty when the automatic handling could not estimate it.
	Source string `json:"source"`
	// SigmaPercent is the 1σ noise at the evaluated maximum, in percent
	// of the evaluated maximum (MaxDoseGy); null when unknown.
	SigmaPercent *float64 `json:"sigma_percent"`
	// SigmaUncertaintyPercent is the standard error of an estimated
	// SigmaPercent (percentage points); null for a given value or a map.
	SigmaUncertaintyPercent *float64 `json:"sigma_uncertainty_percent"`
	// EstimatedSigmaPercent and EstimatedUncertaintyPercent are the
	// evaluated dose's own estimate, whatever the source (a cross-check of
	// a given value or map); null when it could not be made.
	EstimatedSigmaPercent       *float64 `json:"estimated_sigma_percent"`
	EstimatedUncertaintyPercent *float64 `json:"estimated_uncertainty_percent"`
	// MaxDoseGy is the evaluated maximum the percentages refer to: the
	// maximum of the lightly smoothed evaluated dose.
	MaxDoseGy float64 `json:"max_dose_gy"`
	// Model is the noise model: σ ∝ √D, or the per-voxel map.
	Model string `json:"model"`
	// MapUnit is how the map's values were read ("gy", "relative",
	// "percent"); empty without a map.
	MapUnit string `json:"map_unit,omitempty"`
	// Method describes the estimator and the correction, with sources.
	Method string `json:"method"`
	// Corrected is true when the comparison was also made against the
	// denoised evaluated dose.
	Corrected bool `json:"corrected"`
	// Judged is the figure the protocol's rules judged: "corrected" or
	// "raw".
	Judged string `json:"judged"`
	// PassRateShiftPP is the overall pass rate corrected − raw, in
	// percentage points; null without a correction.
	PassRateShiftPP *float64 `json:"pass_rate_shift_pp"`
	// Warning is true when the noise moves the overall or an ROI's pass
	// rate by more than 1 percentage point (every output then warns).
	Warning bool `json:"warning"`
	// RawOverall is Γ over every evaluated point against the evaluated
	// dose as given (equal to Overall without a correction).
	RawOverall GammaStats `json:"raw_overall"`
	// ROIs holds the raw Γ statistics of each ROI, in the order of the
	// result's rois.
	ROIs []NoiseROI `json:"rois"`
	// Filter describes the correction; null without one.
	Filter *NoiseFilter `json:"filter"`
}

// NoiseROI is one ROI's Γ statistics against the evaluated dose as given.
type NoiseROI struct {
	Name string `json:"name"`
	GammaStats
}

// NoiseFilter describes what the denoising filter did.
type NoiseFilter struct {
	// MeanWindowSamples is the mean window width (samples) chosen along
	// each axis of the evaluated grid.
	MeanWindowSamples [3]float64 `json:"mean_window_samples"`
	// ResidualSigmaRatio is the median ratio of the noise left after
	// filtering to the noise before, over the voxels of at least a tenth
	// of the largest σ (model value).
	ResidualSigmaRatio *float64 `json:"residual_sigma_ratio"`
	// FloorGy is the dose below which voxels were left as they are (half
	// the low-dose threshold).
	FloorGy float64 `json:"floor_gy"`
}

// Cluster is a connected region (26-neighbour) of failing voxels.
type Cluster struct {
	VolumeCC   float64    `json:"volume_cc"`
	Voxels     int        `json:"voxels"`
	CentroidMM [3]float64 `json:"centroid_mm"`
	GammaMax   float64    `json:"gamma_max"`
	// ROIs names the ROIs the cluster touches.
	ROIs []string `json:"rois"`
}

// ROIStatus says whether an ROI was evaluated, and if not, why. It is a
// closed set: code compares with the constants, never with text.
type ROIStatus string

// The ROI statuses.
const (
	// StatusEvaluated: at least one of the ROI's points has a Γ.
	StatusEvaluated ROIStatus = "evaluated"
	// StatusBelowThreshold: every point of the ROI is below the low-dose
	// threshold.
	StatusBelowThreshold ROIStatus = "not evaluated: all below threshold"
	// StatusOutsideEvaluated: every point at or above the threshold lies
	// outside the evaluated grid.
	StatusOutsideEvaluated ROIStatus = "not evaluated: outside the evaluated grid"
	// StatusBelowOrOutside: some points below the threshold, the others
	// outside the evaluated grid.
	StatusBelowOrOutside ROIStatus = "not evaluated: below threshold or outside the evaluated grid"
	// StatusOutsideDoseGrid: the ROI lies wholly outside the reference grid.
	StatusOutsideDoseGrid ROIStatus = "not evaluated: outside the dose grid"
	// StatusNoContours: the ROI has no contour.
	StatusNoContours ROIStatus = "not evaluated: no contours"
	// StatusNotRasterised: no closed planar contour could be rasterised
	// (StatusDetail says why).
	StatusNotRasterised ROIStatus = "not evaluated: no contour could be rasterised"
	// StatusNoClosedContours: only points or open contours.
	StatusNoClosedContours ROIStatus = "not evaluated: no closed planar contours (points or open contours only)"
	// StatusTooSmall: no voxel centre lies inside the ROI.
	StatusTooSmall ROIStatus = "not evaluated: smaller than a voxel (no voxel centre inside)"
	// StatusNotEvaluated: not evaluated for another reason.
	StatusNotEvaluated ROIStatus = "not evaluated"
)

// Evaluated reports whether the status is StatusEvaluated.
func (s ROIStatus) Evaluated() bool { return s == StatusEvaluated }

// RuleState is the outcome of one rule check.
type RuleState string

// The outcomes of a rule check.
const (
	// Met: the rule was checked and held.
	Met RuleState = "met"
	// NotMet: the rule was checked and did not hold, or there was nothing
	// to check where the protocol requires something.
	NotMet RuleState = "not met"
	// NotApplicable: there was nothing to check and the protocol (or a
	// deliberate choice on the command line) allows that. It never counts
	// as met.
	NotApplicable RuleState = "not applicable"
)

// Choices records what the user chose besides the protocol that changes
// how a result's rules were judged or its ROIs sampled, so that a verdict
// never hides the options that made it.
type Choices struct {
	// Overrides lists protocol values replaced on the command line, e.g.
	// "--criteria 2%/2mm (protocol: 3%/2mm)".
	Overrides []string `json:"overrides"`
	// KindRules are the ROI kind rules given on the command line, applied
	// before the protocol's.
	KindRules []string `json:"kind_rules"`
	// SubGridROIs names the ROIs evaluated on a finer sub-grid of reference
	// points of step SubGridStepMM.
	SubGridROIs   []string `json:"subgrid_rois"`
	SubGridStepMM float64  `json:"subgrid_step_mm"`
	// NoStructures is set when the comparison was run deliberately without
	// a structure set: per-ROI rules are then not applicable.
	NoStructures bool `json:"no_structures"`
	// UnusualNormDose is set when a normalisation dose outside the
	// plausible band was allowed explicitly.
	UnusualNormDose bool `json:"unusual_norm_dose_allowed"`
	// Method is set when the search method was chosen on the command line.
	Method string `json:"method,omitempty"`
	// EvaluatedScale is the factor the evaluated dose was multiplied by
	// before the comparison (a per-fraction dose against a plan total),
	// null when it was not scaled; EvaluatedScaleSource says who asked and
	// where the factor came from.
	EvaluatedScale       *float64 `json:"evaluated_scale"`
	EvaluatedScaleSource string   `json:"evaluated_scale_source,omitempty"`
	// Interpolation is set when the evaluated dose's interpolation was
	// chosen on the command line.
	Interpolation string `json:"interpolation,omitempty"`
}

// RuleOutcome is one protocol rule and whether it was met.
type RuleOutcome struct {
	// Rule is the rule in words, e.g. "every target: pass rate ≥ 95 %".
	Rule string `json:"rule"`
	// Level is "action" or "tolerance" (or as the protocol names it).
	Level string `json:"level"`
	// Subject is what the rule was applied to: an ROI name or "overall".
	Subject string `json:"subject"`
	// Value is the measured value, null when it could not be measured.
	Value *float64 `json:"value"`
	// ValueText is Value as every output shows it (a pass rate rounded
	// down, see FormatPercent), "n/a" when there is no value.
	ValueText string `json:"value_text"`
	// Limit is the rule's limit.
	Limit float64 `json:"limit"`
	// Outcome is Met, NotMet or NotApplicable.
	Outcome RuleState `json:"outcome"`
	// Met is true when, and only when, Outcome is Met.
	Met bool `json:"met"`
	// Reason explains a rule not met or not applicable.
	Reason string `json:"reason,omitempty"`
	// Conditions lists the choices that changed how this rule's subject
	// was sampled or judged (options that replaced the protocol's values,
	// a sub-grid, a command-line kind rule, ...); empty when none did.
	Conditions []string `json:"conditions"`
}

// Input describes one input file.
type Input struct {
	// Role is "reference", "evaluated", "structures", "plan" or "reference
	// points".
	Role string `json:"role"`
	Path string `json:"path"`
	// SHA256 of the file's bytes, hex.
	SHA256              string `json:"sha256"`
	Modality            string `json:"modality,omitempty"`
	SOPInstanceUID      string `json:"sop_instance_uid,omitempty"`
	FrameOfReferenceUID string `json:"frame_of_reference_uid,omitempty"`
	PatientID           string `json:"patient_id,omitempty"`
	PatientName         string `json:"patient_name,omitempty"`
	DoseUnits           string `json:"dose_units,omitempty"`
	DoseType            string `json:"dose_type,omitempty"`
	DoseSummationType   string `json:"dose_summation_type,omitempty"`
	// Grid describes a dose grid: dims, spacing, origin.
	Grid *GridInfo `json:"grid,omitempty"`
	// Description is anything else worth saying about the input.
	Description string `json:"description,omitempty"`
	// Part is this file's place (1, 2, ...) among the files summed into
	// the dose of its role (see DoseSum); 0 for a file used whole.
	Part int `json:"part,omitempty"`
}

// DoseSum describes a dose made by summing several RT Dose files.
type DoseSum struct {
	// Role is "reference" or "evaluated"; the files summed are the inputs
	// of that role, numbered by Part.
	Role string `json:"role"`
	// Parts is the number of files summed.
	Parts int `json:"parts"`
	// SummationType is the parts' DoseSummationType (BEAM, BEAM_SESSION,
	// FRACTION, FRACTION_SESSION).
	SummationType string `json:"dose_summation_type"`
	// Beams and FractionGroups are the beam and fraction group numbers
	// the parts name, ascending.
	Beams          []int `json:"beams"`
	FractionGroups []int `json:"fraction_groups"`
	// Resampled is true when the parts were on different grids and were
	// interpolated onto a common grid; Method says how they were summed.
	Resampled bool   `json:"resampled"`
	Method    string `json:"method"`
	// PlanCheck says what the parts were checked against: every beam of
	// the RT Plan, or why not.
	PlanCheck string `json:"plan_check"`
	// Grid is the grid of the sum.
	Grid *GridInfo `json:"grid"`
}

// GridInfo describes a dose grid's geometry.
type GridInfo struct {
	Dims      [3]int        `json:"dims"`
	SpacingMM [3]float64    `json:"spacing_mm"`
	OriginMM  [3]float64    `json:"origin_mm"`
	Direction [3][3]float64 `json:"direction"`
	// UniformFrames is false when frame offsets are irregular (SpacingMM[2]
	// is then their mean).
	UniformFrames bool    `json:"uniform_frames"`
	MaxDoseGy     float64 `json:"max_dose_gy"`
}

// Plan is what the RT Plan says about the treatment, for the reviewer's
// context. Nothing in it changes a number of the comparison.
type Plan struct {
	// Source is "--plan" (given) or "reference folder" (found beside the
	// reference dose). The file itself, with its path and SHA-256, is the
	// entry of Inputs with the role "plan".
	Source         string `json:"source"`
	SOPInstanceUID string `json:"sop_instance_uid,omitempty"`
	// Label, Name and Description are RTPlanLabel, RTPlanName and
	// RTPlanDescription.
	Label       string `json:"label"`
	Name        string `json:"name,omitempty"`
	Description string `json:"description,omitempty"`
	// Intent is PlanIntent; ApprovalStatus the plan's approval.
	Intent         string `json:"intent,omitempty"`
	ApprovalStatus string `json:"approval_status,omitempty"`
	// PrescriptionGy is the highest TargetPrescriptionDose of the plan's
	// TARGET dose references, null when the plan states none.
	PrescriptionGy *float64 `json:"prescription_gy"`
	// Prescriptions lists every TARGET dose reference with a prescription.
	Prescriptions []PlanPrescription `json:"prescriptions"`
	// FractionsPlanned is the sum of NumberOfFractionsPlanned over the
	// fraction groups, null when no group states it.
	FractionsPlanned *int `json:"fractions_planned"`
	// FractionGroups lists each fraction group.
	FractionGroups []PlanFractionGroup `json:"fraction_groups"`
	// Beams lists every beam of the plan, setup beams included.
	Beams []PlanBeam `json:"beams"`
	// ReferenceDose says how the reference dose relates to this plan:
	// "names this plan", "names another plan" or "names no plan".
	ReferenceDose string `json:"reference_dose"`
}

// PlanPrescription is one TARGET dose reference of the plan.
type PlanPrescription struct {
	// Description is DoseReferenceDescription.
	Description string `json:"description"`
	// DoseGy is TargetPrescriptionDose.
	DoseGy float64 `json:"dose_gy"`
	// ROINumber is the ReferencedROINumber, 0 when none.
	ROINumber int `json:"roi_number"`
}

// PlanFractionGroup is one fraction group of the plan.
type PlanFractionGroup struct {
	Number int `json:"number"`
	// FractionsPlanned is null when the plan leaves it empty.
	FractionsPlanned *int `json:"fractions_planned"`
	// Beams are the numbers of the beams delivered in each fraction.
	Beams []int `json:"beams"`
}

// PlanBeam is one beam of the plan.
type PlanBeam struct {
	Number int    `json:"number"`
	Name   string `json:"name"`
	// Type is STATIC or DYNAMIC; RadiationType PHOTON, ELECTRON, PROTON,
	// ...; DeliveryType TREATMENT, SETUP, ...
	Type          string `json:"type,omitempty"`
	RadiationType string `json:"radiation_type,omitempty"`
	DeliveryType  string `json:"delivery_type,omitempty"`
	Machine       string `json:"machine,omitempty"`
	// EnergyNominal is NominalBeamEnergy of the first control point (MV,
	// MeV, MeV/u); GantryDeg its gantry angle.
	EnergyNominal *float64 `json:"energy_nominal"`
	GantryDeg     *float64 `json:"gantry_deg"`
	// Meterset is the BeamMeterset per fraction from the fraction group
	// that delivers the beam, in MetersetUnit (MU, NP, ...); null when no
	// group gives one.
	Meterset     *float64 `json:"meterset"`
	MetersetUnit string   `json:"meterset_unit,omitempty"`
	// FractionGroup is the number of the group delivering the beam, 0 when
	// none does.
	FractionGroup int `json:"fraction_group"`
}

// Run holds what may differ between runs on the same inputs.
type Run struct {
	// Started is the start time, RFC 3339 UTC.
	Started string `json:"started"`
	// Seconds is the wall time of the whole comparison.
	Seconds float64 `json:"seconds"`
	// GammaSeconds is the wall time of the gamma search alone.
	GammaSeconds float64 `json:"gamma_seconds"`
	Workers      int     `json:"workers"`
}

// Caution is the statement carried by every output.
const Caution = "voxgamma is a verification aid for qualified medical physicists. " +
	"Its results depend on the criteria, inputs and settings shown. It does not decide whether " +
	"a patient is treated: local protocols, licensed practice and the clinic's own commissioning " +
	"of this tool decide."

// Ptr returns a pointer to v, or nil when v is NaN: the JSON null for a
// number that does not exist.
func Ptr(v float64) *float64 {
	if v != v {
		return nil
	}
	return &v
}
