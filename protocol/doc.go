// Package protocol reads a clinic's comparison protocol and checks
// comparison results against it.
//
// A clinic writes its protocol once, as a small YAML or JSON file (YAML
// reads JSON too): the gamma criteria (Low et al., Med Phys 25 (1998) 656),
// how to classify ROIs whose RTROIInterpretedType is empty, which isodose
// ROIs to add, and the rules each comparison must meet. [Load] and [Parse]
// read and check such a file; [Preset] returns a built-in one;
// [Protocol.GammaCriteria] gives the criteria to run the comparison with and
// [Protocol.Evaluate] checks the [result.Result] against the rules.
//
// A protocol's limits are aids for qualified medical physicists. Meeting
// them does not decide whether a patient is treated: local protocols,
// licensed practice and the clinic's own commissioning decide.
//
// # File format
//
// Top-level fields:
//
//   - name: the protocol's name, required.
//   - description: what it is for.
//   - source: where its numbers come from (a paper, "common practice", the
//     clinic's commissioning). Reports show it beside the verdict.
//   - criteria: the gamma criteria, with the fields
//     criteria (required, the trade's notation "3%/2mm"),
//     normalisation ("global" or "local"; default global),
//     threshold_percent (low-dose threshold in % of the normalisation dose,
//     from 0 to below 100; default 10, after AAPM TG-218),
//     search_mm (search distance in mm; 0 or absent: 3×DTA),
//     norm_dose_gy (normalisation dose in Gy; 0 or absent: the reference
//     maximum) and norm_dose_from ("reference maximum", "value" or
//     "prescription": the RT Plan's TargetPrescriptionDose, which the
//     comparison then needs; absent: as norm_dose_gy says). A normalisation
//     dose outside 0.5–1.5 × the reference maximum, the prescription's too,
//     is refused when the comparison runs (see the analysis package's
//     NormDoseBand).
//   - coverage: overall_percent (the smallest percentage of the reference
//     points at or above the threshold that must have been compared; default
//     99.5; 0 leaves the check out) and roi_percent (the smallest percentage
//     of an ROI's volume that must lie inside both dose grids for a rule on
//     it to be judged; default 100; 0 judges every ROI on its covered part).
//     Both defaults are this tool's choice.
//   - roi_kinds: a list of {pattern, kind, override}: ROIs whose name
//     matches pattern (case-insensitive; with '*' or '?' a glob over the
//     whole name, otherwise a prefix) get kind (target, oar, body or
//     other). Without override: true a rule applies only to ROIs whose
//     RTROIInterpretedType is empty. The first matching rule wins
//     ([Protocol.ROIRules] gives them to the roi package).
//   - isodose_rois: a list of percentages of the normalisation dose; an
//     isodose ROI is added for each.
//   - rules: at least one rule, each with the fields level, subject,
//     metric, op, limit and when_missing (below).
//   - inputs: what to do when the input files say something is off, each
//     "warn" (compare, with a warning on every output) or "error" (refuse:
//     the comparison could not be evaluated): swapped_doses (default warn),
//     when the reference reads as an independent dose and the evaluated
//     dose as the planning system's (dicomio.SwapEvidence: both files'
//     words, or a plan reference only the evaluated dose has), and
//     dose_type_mismatch (default error), when one dose is PHYSICAL and the
//     other EFFECTIVE (PS3.3 C.8.8.3: an effective dose is a physical dose
//     corrected for biological effect by a model). The defaults are this
//     project's choice: a swap read from words is only likely, a physical
//     and an effective dose certainly differ. [Protocol.RefuseSwappedDoses]
//     and [Protocol.RefuseDoseTypeMismatch] read them; a parsed protocol
//     and a preset have them filled in.
//   - record: optional, the results store every comparison run with this
//     protocol is recorded in: an SQLite file (relative to the protocol
//     file's folder) or a postgres:// URL (see package record). A
//     command's --record option overrides it. It is left out of the
//     protocol as results show it.
//   - evaluated_noise: how the evaluated dose's statistical noise (Monte
//     Carlo variance, which biases Γ toward passing) is handled, with the
//     fields handling ("auto", the default: estimated from the evaluated
//     dose and corrected for; "off"; or σ at the evaluated maximum in
//     percent, e.g. 2) and judge ("corrected", the default: the rules
//     judge the figures of the comparison against the denoised evaluated
//     dose; or "raw"). The command line's --evaluated-noise overrides
//     handling.
//
// Every key left out of a file takes the default documented here, never
// Go's zero value (a key written with no value, or ~, counts as left out);
// [Protocol.Resolved] writes every default out, as results show it.
// A field the format does not know is an error naming it, with the file and
// line, so that a misspelt limit is never ignored. Every problem found is
// reported (joined), each as an [*Error] naming the file, the line and the
// field path, e.g. "proto.yaml:23: rules[2].op: op "=>": want >=, <= or
// abs<=". Rule indices count from 0, in file order.
//
// In YAML, write the operators ">=" and "<=" in quotes: a '>' at the
// start of a plain value begins a folded block.
//
// # Rules
//
// subject, metric, op and limit are required. level is "tolerance" (the
// default) or "action"; any other word (e.g. "alert") is kept as written. A
// rule of any level that is not met makes the verdict "fail"; the level says
// how serious that is. when_missing is "fail" (the default) or "skip": what a
// rule whose subject is missing from the comparison gives (below).
//
// subject is one of
//
//   - overall: Γ over every evaluated reference point;
//   - targets: each ROI of the structure set whose kind is target;
//   - oars: each ROI of the structure set whose kind is oar (organ at risk);
//   - roi:NAME: the ROI named NAME (exact name, case-insensitive; any
//     source, so derived ROIs such as "all targets" can be named too);
//   - isodose:P: the isodose ROI of P % of the normalisation dose; P must be
//     listed in isodose_rois.
//
// metric is one of
//
//   - pass_rate: percentage of evaluated points with Γ ≤ 1;
//   - coverage: for overall, the percentage of the reference points at or
//     above the threshold that were compared; for an ROI, the percentage of
//     its volume inside both dose grids;
//   - gamma_mean, gamma_median, gamma_p95, gamma_p99, gamma_max: Γ
//     statistics;
//   - dvh_diff_percent:M and dvh_diff_gy:M: the DVH difference evaluated −
//     reference of metric M (mean, max, min, d98, d95, d50, d2, d0_03cc; the
//     ICRU Report 83 D_x), in percent as the result's DVH difference gives it,
//     or in Gy. These are signed and need an ROI subject.
//
// op is ">=", "<=" or "abs<=" (the absolute value of the measured value ≤
// the limit; only for the signed dvh_diff metrics). limit must be finite; a
// pass-rate or coverage limit lies above 1 and at most 100 (a limit of 1 or
// less is refused as a likely fraction, with the percentage to write), a Γ
// limit is not negative, and so is an abs<= limit.
//
// # Example file
//
// This file is testdata/example.yaml, which the tests read:
//
//	# Protocol of an example clinic: secondary check of VMAT plans.
//	# The numbers are examples; set your own.
//	name: example-vmat
//	description: Secondary check of VMAT plans against an independent dose.
//	source: >-
//	  Criteria and overall limits from AAPM TG-218 (Miften et al., Med Phys 45
//	  (2018) e53); the per-ROI rules are this clinic's own choice.
//	criteria:
//	  criteria: 3%/2mm
//	  normalisation: global
//	  threshold_percent: 10
//	  search_mm: 6
//	  norm_dose_gy: 0 # 0: the reference maximum
//	roi_kinds:
//	  - pattern: "PTV*"
//	    kind: target
//	  - pattern: "z_*"
//	    kind: other
//	    override: true
//	isodose_rois: [50, 80]
//	rules:
//	  - level: tolerance
//	    subject: overall
//	    metric: pass_rate
//	    op: ">="
//	    limit: 95
//	  - level: action
//	    subject: overall
//	    metric: pass_rate
//	    op: ">="
//	    limit: 90
//	  - subject: targets
//	    metric: pass_rate
//	    op: ">="
//	    limit: 95
//	  - subject: targets
//	    metric: dvh_diff_percent:d95
//	    op: abs<=
//	    limit: 3
//	  - subject: oars
//	    metric: gamma_p95
//	    op: "<="
//	    limit: 1
//	  - level: action
//	    subject: roi:SpinalCord
//	    metric: dvh_diff_gy:d0_03cc
//	    op: "<="
//	    limit: 0.5
//	  - subject: isodose:50
//	    metric: gamma_mean
//	    op: "<="
//	    limit: 0.5
//
// The same protocol in JSON is testdata/example.json.
//
// # Evaluation
//
// [Protocol.Evaluate] returns first the coverage rule ("overall: coverage ≥
// 99.5 %", unless coverage.overall_percent is 0), then one
// [result.RuleOutcome] per rule and subject, in rule order and, within a
// rule, in the order of the result's ROIs, so the outcome list is
// deterministic. Its Rule is [Rule.String], Subject the ROI name (or
// "overall"), Value the exact measured value (null when there is none),
// ValueText the value as every output shows it (percentages rounded down to
// two decimals, never 100.00 unless they are 100), Limit the rule's limit,
// Outcome one of met, not met and not applicable (Met is true only when the
// outcome is met), and Conditions the choices that changed how the rule was
// judged (criteria replaced on the command line, a sub-grid, a
// command-line kind rule, an accepted unusual normalisation dose, the
// exhaustive search), read from the result's Choices and ROIs. Comparisons
// use the exact values, never the rounded text (a pass rate of 94.96 shown
// as "94.9" does not meet "≥ 95"); a value equal to the limit meets it
// ("95 ≥ 95"). For abs<= the Value is the signed difference and its
// absolute value is compared. The verdict is "pass" when no outcome is not
// met and at least one is met: outcomes that are all not applicable checked
// nothing, and make no pass.
//
// Subjects are matched in the result like this:
//
//   - targets and oars take the ROIs with Source "structure set" and Kind
//     "target" or "oar" (derived ROIs such as "all targets" are not
//     included).
//   - roi:NAME takes every ROI of that name (a structure set may repeat a
//     name).
//   - isodose:P takes the ROIs with Source "isodose" whose name begins
//     "isodose P%" (as the roi package names them, e.g. "isodose 50% of
//     60 Gy").
//
// A rule whose subject matches nothing (no target or organ at risk in the
// comparison, an ROI not found) gives one outcome with no value: not met
// with the reason "no target ROI in this comparison: nothing to check, and
// the rule requires it (when_missing: fail)" by default, not applicable with
// when_missing: skip. When the comparison was run deliberately without a
// structure set (the result's Choices.NoStructures, from --no-structures),
// rules on targets, organs at risk and named ROIs are not applicable.
//
// A rule on an ROI covered less than coverage.roi_percent (its
// covered_percent in the result) is not met whatever its value, with the
// reason naming the covered share: a pass rate over part of a target
// answers a smaller question than the one asked.
//
// A value that could not be measured is handled strictly:
//
//   - overall with nothing evaluated: not met.
//   - A pass-rate or Γ rule on an ROI that was not evaluated (no value): not
//     met, with the reason "not evaluated: " and the ROI's Status, e.g. "not
//     evaluated: all below threshold". A target that could not be evaluated
//     must not pass.
//   - The one exception: an ROI of kind oar whose Status is
//     [result.StatusBelowThreshold] meets pass-rate and Γ rules (value null,
//     reason "every point of this organ at risk is below the low-dose
//     threshold"). An organ at risk lying wholly in low dose is not a
//     failure. An organ at risk not evaluated for any other reason (outside
//     the dose grid, no contours) does not meet the rule. Statuses are a
//     closed set of typed values, compared as values, never as text.
//   - A DVH rule on an ROI without that DVH value (no DVH, or the difference
//     does not exist) is not met, whatever the ROI's kind.
//
// A rule that does not parse (possible only in a protocol built in code and
// not validated) gives one outcome, not met, whose reason begins "invalid
// rule:". A protocol without rules gives one outcome, not met: nothing was
// checked.
//
// The limits mean what they say only for a result obtained with the
// protocol's criteria; [Protocol.CheckCriteria] compares the criteria a
// result records with the protocol's.
//
// # Presets
//
// [PresetNames] lists the built-in protocols; each states its source:
//
//   - tg218: AAPM TG-218 (Miften et al., Med Phys 45 (2018) e53): 3%/2mm
//     global, 10 % threshold, overall pass rate ≥ 95 % (tolerance) and
//     ≥ 90 % (action); and every target ≥ 95 % (tolerance), which is this
//     tool's choice, not TG-218's.
//   - stereotactic: 2%/1mm global, 10 % threshold; overall and every target
//     ≥ 95 %, |ΔD95| of each target ≤ 3 %, each organ at risk ≥ 90 %: common
//     practice in stereotactic QA, no single published source.
//   - epid-invivo-example: 3%/3mm global, 10 % threshold; mean Γ ≤ 0.5 and
//     Γ 99th percentile ≤ 2 inside the 50 % isodose: example alert levels of
//     the kind used in in-vivo EPID dosimetry, not taken from a specific
//     paper; set your own.
//
// All three classify ROIs without an interpreted type whose names begin
// PTV, CTV or GTV as targets, and check coverage with the defaults (99.5 %
// overall, whole ROIs).
package protocol
