package main

import (
	"errors"
	"fmt"
	"os"
	"strings"

	"github.com/spf13/cobra"

	"voxgamma/analysis"
	"voxgamma/dicomio"
	"voxgamma/job"
	"voxgamma/roi"
	"voxgamma/structure"
)

func newInspect(g *globals) *cobra.Command {
	var kindRules []string
	var deidentify, values bool
	var siteKey, maxMemory string
	cmd := &cobra.Command{
		Use:   "inspect PATH...",
		Short: "Describe RT Dose, RT Structure Set and RT Plan files or folders",
		Long: `inspect says what is in each file or folder: for a dose, the grid, spacing,
extent, units, summation type and frame of reference; for a structure set, the
ROIs with their kinds and contour counts; for a plan, its label, prescription,
fractions and beams; for a folder, which files voxgamma would choose and why. Problems found are listed; the exit status is 1 when a
path could not be read.

A dose's header is read, not its values, whatever the grid's size: --values
also reads the values (for the maximum dose), within the memory budget.`,
		Example: `  voxgamma inspect plan/RD.dcm plan/RS.dcm
  voxgamma inspect export-folder/`,
		Args: cobra.MinimumNArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			var rules []roi.Rule
			for _, k := range kindRules {
				r, err := roi.ParseRule(k)
				if err != nil {
					return fmt.Errorf("--kind %q: %w", k, err)
				}
				rules = append(rules, r)
			}
			run, err := startDeid(g, deidentify, siteKey)
			if err != nil {
				return err
			}
			if run != nil {
				for i, p := range args {
					run.Base().Path(p, fmt.Sprintf("input %d", i+1))
				}
			}
			var failed []string
			for _, p := range args {
				if err := inspectPath(g, p, rules, values, maxMemory); err != nil {
					fmt.Fprintf(g.stdout, "%s: problem: %s\n\n", p, oneLine(err.Error()))
					failed = append(failed, p)
				}
			}
			if len(failed) > 0 {
				return fmt.Errorf("could not read %s", strings.Join(failed, ", "))
			}
			g.outcome = fmt.Sprintf("inspect: %d of %d paths read", len(args)-len(failed), len(args))
			return nil
		},
	}
	cmd.Flags().StringArrayVar(&kindRules, "kind", nil, `ROI kind rule PATTERN=KIND, as for compare (repeatable)`)
	cmd.Flags().BoolVar(&deidentify, "deidentify", false, "show no path, name, ID, date, description or original UID (keyed pseudonyms and remapped UIDs instead), as compare --deidentify")
	deidFlags(cmd, &siteKey)
	cmd.Flags().BoolVar(&values, "values", false, "also read each dose's values (its maximum), checked against the memory budget first")
	cmd.Flags().StringVar(&maxMemory, "max-memory", "", "memory budget for --values, e.g. 8GiB (default: 70 % of the memory available)")
	return cmd
}

// seen registers a file's identifying values with the de-identification
// of the run, if any, before anything about it is printed.
func (g *globals) seen(role, path string, dose *dicomio.DoseInfo, set *structure.Set) {
	if g.deid != nil {
		g.deid.Base().Seen(role, path, dose, set)
	}
}

func inspectPath(g *globals, path string, rules []roi.Rule, values bool, maxMemory string) error {
	w := g.stdout
	st, err := os.Stat(path)
	if err != nil {
		return err
	}
	if st.IsDir() {
		folder, err := dicomio.ScanFolder(path)
		if err != nil {
			return err
		}
		for _, d := range folder.Doses {
			g.seen("", d.Path, d.Info, nil)
		}
		for _, s := range folder.StructureSets {
			g.seen("", s.Path, nil, s.Set)
		}
		for _, p := range folder.Plans {
			g.seen("", p.Path, analysis.PlanSeen(p.Plan), nil)
		}
		for _, ig := range folder.Ignored {
			g.seen("", ig.Path, nil, nil)
		}
		fmt.Fprintf(w, "%s: folder with %d RT Dose, %d RT Structure Set and %d RT Plan files\n", path, len(folder.Doses), len(folder.StructureSets), len(folder.Plans))
		for _, d := range folder.Doses {
			kind := "dose"
			if d.Info.DisagreementMap() != "" {
				kind = "map (DoseType ERROR, never taken as a dose)"
			}
			fmt.Fprintf(w, "  %s %s: %s %s, %d×%d×%d, frame of reference %s\n", kind, d.Path, d.Info.DoseSummationType, d.Info.DoseUnits,
				d.Info.Columns, d.Info.Rows, d.Info.NumberOfFrames, d.Info.FrameOfReferenceUID)
		}
		for _, s := range folder.StructureSets {
			fmt.Fprintf(w, "  structures %s\n", s.Path)
		}
		for _, p := range folder.Plans {
			fmt.Fprintf(w, "  plan %s: %q, SOP instance %s\n", p.Path, p.Plan.Label, p.Plan.SOPInstanceUID)
		}
		for _, ig := range folder.Ignored {
			fmt.Fprintf(w, "  ignored %s\n", strings.TrimSpace(fmt.Sprint(ig)))
		}
		// As either dose, and, when the words of the files tell them apart,
		// as each of the two.
		choice, err := folder.Choose()
		if err == nil {
			fmt.Fprintf(w, "  would use:\n")
			for _, line := range choice.Account {
				fmt.Fprintf(w, "    %s\n", line)
			}
			fmt.Fprintln(w)
			return nil
		}
		ref, rerr := folder.ChooseFor(dicomio.ChooseOptions{Role: dicomio.ReferenceRole})
		if rerr != nil {
			fmt.Fprintln(w)
			return err
		}
		eval, eerr := folder.ChooseFor(dicomio.ChooseOptions{Role: dicomio.EvaluatedRole, Exclude: []string{ref.Dose.Path}, ExcludeRole: dicomio.ReferenceRole})
		if eerr != nil {
			fmt.Fprintln(w)
			return err
		}
		for _, c := range []struct {
			role   string
			choice *dicomio.Choice
		}{{"the reference", ref}, {"the evaluated dose", eval}} {
			fmt.Fprintf(w, "  would use as %s (given the folder for both):\n", c.role)
			for _, line := range c.choice.Account {
				fmt.Fprintf(w, "    %s\n", line)
			}
		}
		fmt.Fprintln(w)
		return nil
	}
	info, geo, derr := dicomio.ReadDoseHeader(path)
	if derr == nil {
		g.seen("", path, info, nil)
		var max *float32
		if values {
			budget, source := job.DefaultBudget()
			if maxMemory != "" {
				if budget, err = job.ParseBytes(maxMemory); err != nil {
					return fmt.Errorf("--max-memory: %w", err)
				}
				source = "--max-memory"
			}
			n := int64(info.Rows) * int64(info.Columns) * int64(max1(info.NumberOfFrames))
			if need := int64(4)*n + job.FixedBytesPerCase; need > budget {
				return fmt.Errorf("reading the values of %d×%d×%d voxels needs about %s; the memory budget is %s (%s): inspect it without --values, or raise --max-memory",
					info.Columns, info.Rows, info.NumberOfFrames, job.FormatBytes(need), job.FormatBytes(budget), source)
			}
			grid, _, err := dicomio.ReadDose(path)
			if err != nil {
				return err
			}
			m, _ := grid.Max()
			max = &m
		}
		describeDose(g, path, geo, info, max)
		return nil
	}
	set, serr := dicomio.ReadStructureSet(path)
	if serr == nil {
		g.seen("", path, nil, set)
		fmt.Fprintf(w, "%s: RT Structure Set %q, %d ROIs, frame of reference %s\n", path, set.Label, len(set.ROIs), set.FrameOfReferenceUID)
		if g.verbose {
			fmt.Fprintf(w, "  patient %s (%s)\n", set.PatientName, set.PatientID)
		}
		for i := range set.ROIs {
			r := &set.ROIs[i]
			counts := map[string]int{}
			for _, c := range r.Contours {
				counts[string(c.Type)]++
			}
			var parts []string
			for _, t := range []string{"CLOSED_PLANAR", "POINT", "OPEN_PLANAR", "OPEN_NONPLANAR"} {
				if counts[t] > 0 {
					parts = append(parts, fmt.Sprintf("%d %s", counts[t], t))
				}
			}
			if len(parts) == 0 {
				parts = []string{"no contours"}
			}
			typ := r.InterpretedType
			if typ == "" {
				typ = "(no type)"
			}
			fmt.Fprintf(w, "  %3d %-24s %-10s kind %-6s %s\n", r.Number, r.Name, typ, roi.Classify(r, rules), strings.Join(parts, ", "))
		}
		fmt.Fprintln(w)
		return nil
	}
	plan, perr := dicomio.ReadPlan(path)
	if perr == nil {
		g.seen("", path, analysis.PlanSeen(plan), nil)
		describePlan(g, path, plan)
		return nil
	}
	// None: report the most specific reason. A file that is not a dose
	// says so through its modality; then the structure set reader's
	// reason, or the plan reader's for a plan, is the one that matters.
	var me *dicomio.ModalityError
	if errors.As(derr, &me) {
		if errors.As(serr, &me) && !errors.As(perr, &me) {
			return perr
		}
		return serr
	}
	return derr
}

func describePlan(g *globals, path string, p *dicomio.Plan) {
	w := g.stdout
	fmt.Fprintf(w, "%s: RT Plan %q", path, p.Label)
	if p.Name != "" {
		fmt.Fprintf(w, " (%s)", p.Name)
	}
	fmt.Fprintf(w, ", %s, geometry %s, SOP instance %s\n", orDash(p.ApprovalStatus), orDash(p.Geometry), p.SOPInstanceUID)
	if g.verbose {
		fmt.Fprintf(w, "  patient %s (%s)\n", p.PatientName, p.PatientID)
	}
	if rx, ok := p.PrescriptionGy(); ok {
		fmt.Fprintf(w, "  prescription %g Gy", rx)
		for _, d := range p.Prescriptions() {
			fmt.Fprintf(w, "; %s %g Gy", orDash(d.Description), *d.TargetPrescriptionGy)
		}
		fmt.Fprintln(w)
	} else {
		fmt.Fprintln(w, "  no target prescription")
	}
	for _, fg := range p.FractionGroups {
		fmt.Fprintf(w, "  fraction group %d: %d fractions, beams", fg.Number, fg.FractionsPlanned)
		for _, b := range fg.Beams {
			ms := "-"
			if b.Meterset != nil {
				ms = fmt.Sprintf("%g", *b.Meterset)
			}
			fmt.Fprintf(w, " %d (%s)", b.BeamNumber, ms)
		}
		fmt.Fprintln(w)
	}
	for _, b := range p.Beams {
		fmt.Fprintf(w, "  beam %d %q: %s %s, %s, machine %s, %d control points\n", b.Number, b.Name, orDash(b.Type), orDash(b.RadiationType), orDash(b.DeliveryType), orDash(b.MachineName), b.ControlPoints)
	}
	for _, n := range p.Notes {
		fmt.Fprintf(w, "  note: %s\n", n)
	}
	fmt.Fprintln(w)
}

func orDash(s string) string {
	if s == "" {
		return "-"
	}
	return s
}

func max1(n int) int { return max(n, 1) }

// describeDose prints what a dose header says, and the maximum dose when
// its values were read (max not nil).
func describeDose(g *globals, path string, grid *dicomio.DoseGeometry, info *dicomio.DoseInfo, max *float32) {
	w := g.stdout
	d := grid.Dims
	lo, hi := grid.Bounds()
	fmt.Fprintf(w, "%s: RT Dose %s, units %s, type %s, summation %s\n", path, info.SeriesDescription, info.DoseUnits, info.DoseType, info.DoseSummationType)
	if g.verbose {
		fmt.Fprintf(w, "  patient %s (%s)\n", info.PatientName, info.PatientID)
	}
	fmt.Fprintf(w, "  grid %d×%d×%d (columns × rows × frames), %d-bit, scaling %g\n", d[0], d[1], d[2], info.BitsAllocated, info.DoseGridScaling)
	var sp []string
	for a := 0; a < 3; a++ {
		s, uniform := grid.Spacing(a)
		if uniform {
			sp = append(sp, fmt.Sprintf("%g", s))
		} else {
			sp = append(sp, fmt.Sprintf("%g (mean; irregular)", s))
		}
	}
	fmt.Fprintf(w, "  spacing %s mm; orientation %v\n", strings.Join(sp, " × "), info.ImageOrientationPatient)
	fmt.Fprintf(w, "  extent x %.2f…%.2f, y %.2f…%.2f, z %.2f…%.2f mm\n", lo[0], hi[0], lo[1], hi[1], lo[2], hi[2])
	if max != nil {
		fmt.Fprintf(w, "  maximum %.4g %s; frame of reference %s\n", *max, strings.ToLower(info.DoseUnits), info.FrameOfReferenceUID)
	} else {
		fmt.Fprintf(w, "  frame of reference %s (dose values not read: --values for the maximum)\n", info.FrameOfReferenceUID)
	}
	for _, n := range info.Notes {
		fmt.Fprintf(w, "  note: %s\n", n)
	}
	fmt.Fprintln(w)
}
