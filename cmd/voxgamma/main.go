// Command voxgamma compares a reference and an evaluated 3D radiotherapy
// dose with the volumetric gamma index and reports per structure: pass rates
// and dose-volume differences for every target and organ at risk.
//
// Exit status: 0 = evaluated and every rule of the protocol met; 2 =
// evaluated and at least one rule not met; 1 = could not evaluate (bad input,
// bad option, an output that could not be written). One line on stderr says
// which.
//
// voxgamma is a verification aid for qualified medical physicists; local
// protocols and licensed practice decide.
package main

import (
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"

	"github.com/spf13/cobra"

	"voxgamma/deid"
	"voxgamma/internal/fault"
	"voxgamma/internal/safetext"
	"voxgamma/job"
)

// version is the voxgamma version recorded in every result.
var version = "0.1.0"

// Exit statuses.
const (
	exitPass     = 0
	exitError    = 1
	exitRuleFail = 2
)

// verdictError carries a completed comparison whose rules were not all met:
// not a failure of the program, but exit status 2.
type verdictError struct{ msg string }

func (e *verdictError) Error() string { return e.msg }

func main() {
	os.Exit(run(os.Args[1:], os.Stdout, os.Stderr))
}

// run executes the command line and returns the exit status. Every error
// ends as one line on stderr.
func run(args []string, stdout, stderr io.Writer) (status int) {
	g := newGlobals(stdout, stderr)
	stderr = g.stderr
	defer g.flush()
	defer func() {
		if g != nil && g.restoreLimit != nil {
			g.restoreLimit()
		}
		if p := recover(); p != nil {
			fmt.Fprintf(stderr, "voxgamma: internal error: %s (please report it with the command line)\n", oneLine(fmt.Sprint(p)))
			status = exitError
		}
	}()
	root := newRoot(g)
	root.SetArgs(args)
	err := root.Execute()
	var v *verdictError
	switch {
	case err == nil:
		if g.outcome != "" {
			fmt.Fprintf(stderr, "voxgamma: %s\n", g.outcome)
		}
		return exitPass
	case errors.As(err, &v):
		fmt.Fprintf(stderr, "voxgamma: %s\n", v.msg)
		return exitRuleFail
	default:
		fmt.Fprintf(stderr, "voxgamma: error: %s\n", oneLine(err.Error()))
		return exitError
	}
}

// commandBudget is the memory budget of a command: its --max-memory when
// given and valid (the command itself reports an invalid one), else
// job.DefaultBudget. The Go runtime's soft memory limit is set to it
// (runtime/debug.SetMemoryLimit) for every command, so that the collector
// works harder as the heap nears the budget instead of the process growing
// until the system kills it.
func commandBudget(cmd *cobra.Command) int64 {
	if fl := cmd.Flags().Lookup("max-memory"); fl != nil && fl.Changed {
		if b, err := job.ParseBytes(fl.Value.String()); err == nil {
			return b
		}
	}
	b, _ := job.DefaultBudget()
	return b
}

func oneLine(s string) string {
	out := make([]rune, 0, len(s))
	for _, r := range s {
		if r == '\n' || r == '\r' {
			r = ';'
			if len(out) > 0 && out[len(out)-1] == ';' {
				continue
			}
			out = append(out, ';', ' ')
			continue
		}
		out = append(out, r)
	}
	return string(out)
}

// globals are the options every command shares.
type globals struct {
	quiet, verbose bool
	// stdout and stderr escape every control character but line feeds and
	// tabs (see internal/safetext): text from input files (ROI names,
	// descriptions, paths) cannot drive the terminal. Every message goes
	// through them.
	stdout, stderr *safetext.Writer
	// term is stderr as given, for the progress bars' own control
	// sequences only.
	term io.Writer
	log  *slog.Logger
	// outcome is the line a command that ends well leaves for stderr (run
	// prints it, also with --quiet): a pipeline always reads the outcome
	// on the last line.
	outcome string
	// restoreLimit undoes the memory limit a command set (run calls it).
	restoreLimit func()
	// deid is the run's de-identification, nil unless asked for
	// (startDeid): the console writers then scrub what it knows.
	deid *deid.Run
}

// startDeid starts the de-identification of this run when on: it loads the
// site key (--site-key FILE, else VOXGAMMA_SITE_KEY, else a random key for
// the run), makes stdout and stderr scrub every identifying value the run
// learns, and returns the run; nil when off (a key file without
// --deidentify is an error).
func startDeid(g *globals, on bool, keyFile string) (*deid.Run, error) {
	if !on {
		if keyFile != "" {
			return nil, errors.New("--site-key is used with --deidentify only")
		}
		return nil, nil
	}
	k, err := deid.LoadKey(keyFile, os.Getenv)
	if err != nil {
		return nil, err
	}
	r := deid.NewRun(k)
	g.deid = r
	g.stdout.Filter, g.stderr.Filter = r.Scrub, r.Scrub
	return r, nil
}

// deidFlags registers --site-key beside a command's --deidentify.
func deidFlags(cmd *cobra.Command, keyFile *string) {
	cmd.Flags().StringVar(keyFile, "site-key", "", "with --deidentify: file holding the site secret that keys the pseudonyms (HMAC-SHA-256; at least 16 bytes); default $"+deid.EnvSiteKey+", else a random key for this run")
}

func newGlobals(stdout, stderr io.Writer) *globals {
	return &globals{stdout: safetext.NewWriter(stdout), stderr: safetext.NewWriter(stderr), term: stderr}
}

// flush writes what the console writers held back.
func (g *globals) flush() {
	g.stdout.Flush()
	g.stderr.Flush()
}

func newRoot(g *globals) *cobra.Command {
	stdout, stderr := g.stdout, g.stderr
	root := &cobra.Command{
		Use:   "voxgamma",
		Short: "Volumetric gamma comparison of radiotherapy doses, per structure",
		Long: `voxgamma compares a reference 3D dose (the planning system's) with an evaluated
3D dose (a Monte Carlo recalculation, or a dose reconstructed from portal images)
using the gamma index of Low et al. (Med Phys 25 (1998) 656), and reports pass
rates and dose-volume differences for every target and organ at risk.

It is a verification aid for qualified medical physicists. Results depend on the
criteria and inputs shown; local protocols and licensed practice decide.

Exit status: 0 every rule met, 2 a rule not met, 1 could not evaluate.`,
		SilenceUsage:  true,
		SilenceErrors: true,
		PersistentPreRun: func(cmd *cobra.Command, args []string) {
			level := slog.LevelWarn
			if g.verbose {
				level = slog.LevelDebug
			}
			if g.quiet {
				level = slog.LevelError
			}
			g.log = slog.New(slog.NewTextHandler(g.stderr, &slog.HandlerOptions{Level: level}))
			g.restoreLimit = memoryLimit(commandBudget(cmd))
			fault.Point(fault.Command + " " + cmd.Name())
		},
	}
	root.SetOut(stdout)
	root.SetErr(stderr)
	root.PersistentFlags().BoolVarP(&g.quiet, "quiet", "q", false, "print nothing but errors and the verdict line")
	root.PersistentFlags().BoolVarP(&g.verbose, "verbose", "v", false, "print diagnostics (may include patient names from the files)")
	root.AddCommand(newCompare(g), newDemo(g), newInspect(g), newSweep(g), newBatch(g), newBatchSummary(g), newWatch(g),
		newRecordCmd(g), newLimits(g), newTrend(g))
	root.Version = version
	return root
}
