// Package trend turns a clinic's recorded comparisons (package record)
// into process-based limits and control charts, as AAPM TG-218 (Miften et
// al., Med Phys 45 (2018) e53) asks a clinic to do with its own history.
//
// [Analyze] groups plans by their labels (machine, technique, site,
// planning system, recalculation engine: those chosen) and criteria, and
// follows, per group, each [Metric]: the overall pass rate, the pass rate
// of the worst structure-set ROI of each kind (target, organ at risk,
// body, other), and the overall mean Γ. For each it computes the
// individuals chart, TG-218's action limit (pass rates) and the Western
// Electric signals (package spc). [Analysis.Limits] is the table
// (text or JSON), [Analysis.Protocol] a protocol whose rules are one
// group's limits, and [Analysis.WritePage] the self-contained control-chart
// page. The method and its sources are in [Method], which every output
// repeats.
package trend
