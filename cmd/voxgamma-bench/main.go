// Command voxgamma-bench measures voxgamma end to end on the invented,
// seeded cases of internal/benchcase: the pass-rate sweep of BENCHMARKS.md.
// For every evaluated dose and worker count it runs the voxgamma binary's
// compare as a child process (with the case's structure set: three PTVs and
// a body outline, unless -no-structures) and reports its wall time, CPU time, engine
// time (run.gamma_seconds), peak resident memory, and the same for the
// floor (reading both doses with dicomio and one trilinear dose-difference
// pass) measured in the same run.
//
//	go build -o /tmp/voxgamma ./cmd/voxgamma
//	go run ./cmd/voxgamma-bench -voxgamma /tmp/voxgamma -dir /tmp/vgbench
//
// The case files are written once into DIR/SIZE and reused.
package main

import (
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"time"

	"voxgamma/dicomio"
	"voxgamma/internal/benchcase"
	"voxgamma/job"
)

func main() {
	if len(os.Args) == 4 && os.Args[1] == "floor" {
		if err := floor(os.Args[2], os.Args[3]); err != nil {
			fmt.Fprintln(os.Stderr, "voxgamma-bench:", err)
			os.Exit(1)
		}
		return
	}
	if err := run(os.Args[1:], os.Stdout); err != nil {
		fmt.Fprintln(os.Stderr, "voxgamma-bench:", err)
		os.Exit(1)
	}
}

func run(args []string, w io.Writer) error {
	fl := flag.NewFlagSet("voxgamma-bench", flag.ContinueOnError)
	dir := fl.String("dir", filepath.Join(os.TempDir(), "voxgamma-bench"), "folder for the case files (kept and reused)")
	size := fl.String("size", "256x256x160", "reference grid size (1 mm voxels), NXxNYxNZ")
	workers := fl.String("workers", "1,2", "worker counts to run")
	variants := fl.String("variants", "pass,mid,fail", "evaluated doses to run: "+variantNames())
	bin := fl.String("voxgamma", "voxgamma", "the voxgamma binary to measure")
	interp := fl.String("interpolation", "", "--interpolation for compare (empty: its default)")
	seed := fl.Uint64("seed", 2026, "seed of the evaluated doses' noise")
	runs := fl.Int("runs", 1, "runs of each measurement")
	noStruct := fl.Bool("no-structures", false, "compare without the structure set")
	limit := fl.Bool("budget", false, "give compare --max-memory equal to its own estimate (job.EstimateBytes), which also sets the Go runtime's soft memory limit")
	if err := fl.Parse(args); err != nil {
		return err
	}
	s, err := parseSize(*size)
	if err != nil {
		return err
	}
	caseDir := filepath.Join(*dir, s.String())
	files, err := ensure(caseDir, s, *seed)
	if err != nil {
		return err
	}
	var ws []int
	for _, f := range strings.Split(*workers, ",") {
		n, err := strconv.Atoi(strings.TrimSpace(f))
		if err != nil || n < 1 {
			return fmt.Errorf("-workers %q: want counts of 1 or more", *workers)
		}
		ws = append(ws, n)
	}
	self, err := os.Executable()
	if err != nil {
		return err
	}
	inputs := 4 * float64(s[0]*s[1]*s[2]+(s[0]+1)*(s[1]+1)*(s[2]+1))
	est := float64(job.EstimateBytes(int64(s[0]*s[1]*s[2]), int64((s[0]+1)*(s[1]+1)*(s[2]+1))))
	fmt.Fprintf(w, "case %s (inputs %.0f MiB, --max-memory estimate %.0f MiB), compare with %s%s%s\n\n", s, inputs/(1<<20), est/(1<<20), *bin,
		map[bool]string{true: "", false: " --interpolation " + *interp}[*interp == ""], map[bool]string{true: " --no-structures", false: ""}[*noStruct]+map[bool]string{true: " --max-memory ESTIMATE", false: ""}[*limit])
	fmt.Fprintln(w, "| evaluated | workers | pass rate (%) | points | wall (s) | CPU (s) | engine (s) | peak RSS (MiB) | RSS / inputs | estimate / RSS | wall / floor |")
	fmt.Fprintln(w, "|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|")
	for _, v := range strings.Split(*variants, ",") {
		eval, ok := files.Evaluated[strings.TrimSpace(v)]
		if !ok {
			return fmt.Errorf("-variants: no variant %q (%s)", v, variantNames())
		}
		for r := 0; r < *runs; r++ {
			fm, err := measure(self, "floor", files.Reference, eval)
			if err != nil {
				return fmt.Errorf("floor: %w", err)
			}
			fmt.Fprintf(w, "| %s: floor | 1 | | | %.2f | %.2f | | %.0f | %.2f | | 1 |\n", v, fm.wall, fm.cpu, fm.rss/(1<<20), fm.rss/inputs)
			for _, n := range ws {
				out := filepath.Join(caseDir, fmt.Sprintf("result-%s-%d.json", v, n))
				a := []string{"compare", "--reference", files.Reference, "--evaluated", eval,
					"--json", out, "--force", "--quiet", "--workers", strconv.Itoa(n)}
				if *noStruct {
					a = append(a, "--no-structures")
				} else {
					a = append(a, "--structures", files.Structures)
				}
				if *interp != "" {
					a = append(a, "--interpolation", *interp)
				}
				if *limit {
					a = append(a, "--max-memory", strconv.FormatInt(int64(est), 10))
				}
				m, err := measure(*bin, a...)
				var ee *exec.ExitError
				if err != nil && !(errors.As(err, &ee) && ee.ExitCode() == 2) {
					return fmt.Errorf("%s %s: %w", *bin, strings.Join(a, " "), err)
				}
				var res struct {
					Overall struct {
						Evaluated int      `json:"evaluated"`
						PassRate  *float64 `json:"pass_rate"`
					} `json:"overall"`
					Run struct {
						GammaSeconds float64 `json:"gamma_seconds"`
					} `json:"run"`
				}
				data, err := os.ReadFile(out)
				if err != nil {
					return err
				}
				if err := json.Unmarshal(data, &res); err != nil {
					return fmt.Errorf("%s: %w", out, err)
				}
				pr := 0.0
				if res.Overall.PassRate != nil {
					pr = *res.Overall.PassRate
				}
				fmt.Fprintf(w, "| %s | %d | %.1f | %d | %.2f | %.2f | %.2f | %.0f | %.2f | %.2f | %.1f |\n", v, n, pr, res.Overall.Evaluated,
					m.wall, m.cpu, res.Run.GammaSeconds, m.rss/(1<<20), m.rss/inputs, est/m.rss, m.wall/fm.wall)
			}
		}
	}
	return nil
}

func variantNames() string {
	var n []string
	for _, v := range benchcase.Variants {
		n = append(n, v.Name)
	}
	return strings.Join(n, ", ")
}

func parseSize(s string) (benchcase.Size, error) {
	var z benchcase.Size
	parts := strings.Split(s, "x")
	if len(parts) != 3 {
		return z, fmt.Errorf("-size %q: want NXxNYxNZ", s)
	}
	for a, p := range parts {
		n, err := strconv.Atoi(p)
		if err != nil || n < 8 {
			return z, fmt.Errorf("-size %q: want three counts of 8 or more", s)
		}
		z[a] = n
	}
	return z, nil
}

// ensure returns the case's files, writing them when any is missing.
func ensure(dir string, s benchcase.Size, seed uint64) (benchcase.Files, error) {
	fs := benchcase.Files{Reference: filepath.Join(dir, "reference.dcm"), Evaluated: map[string]string{}, Structures: filepath.Join(dir, "structures.dcm")}
	missing := false
	for _, p := range []string{fs.Reference, fs.Structures} {
		if _, err := os.Stat(p); err != nil {
			missing = true
		}
	}
	for _, v := range benchcase.Variants {
		p := filepath.Join(dir, "evaluated-"+v.Name+".dcm")
		fs.Evaluated[v.Name] = p
		if _, err := os.Stat(p); err != nil {
			missing = true
		}
	}
	if !missing {
		return fs, nil
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fs, err
	}
	return benchcase.Write(dir, s, seed)
}

type measurement struct{ wall, cpu, rss float64 }

// measure runs a child process and returns its wall and CPU time (s) and
// peak resident set (bytes, from the kernel's getrusage of the child).
func measure(bin string, args ...string) (measurement, error) {
	cmd := exec.Command(bin, args...)
	cmd.Stdout = io.Discard
	var stderr strings.Builder
	cmd.Stderr = &stderr
	start := time.Now()
	err := cmd.Run()
	m := measurement{wall: time.Since(start).Seconds()}
	if cmd.ProcessState != nil {
		if ru, ok := cmd.ProcessState.SysUsage().(*syscall.Rusage); ok {
			m.cpu = float64(ru.Utime.Sec+ru.Stime.Sec) + float64(ru.Utime.Usec+ru.Stime.Usec)/1e6
			m.rss = float64(ru.Maxrss) * 1024 // kilobytes on Linux
		}
	}
	if err != nil {
		var ee *exec.ExitError
		if errors.As(err, &ee) && ee.ExitCode() == 2 {
			return m, err
		}
		return m, fmt.Errorf("%w: %s", err, strings.TrimSpace(stderr.String()))
	}
	return m, nil
}

// floor reads both doses with dicomio and makes the trilinear dose
// difference of the evaluated dose on the reference grid: the least any
// comparison of the two files does.
func floor(ref, eval string) error {
	r, _, err := dicomio.ReadDose(ref)
	if err != nil {
		return err
	}
	e, _, err := dicomio.ReadDose(eval)
	if err != nil {
		return err
	}
	on, err := e.ResampleOnto(r, 0)
	if err != nil {
		return err
	}
	sum := 0.0
	for n, v := range on.Data {
		sum += float64(v - r.Data[n])
	}
	if sum != sum {
		return errors.New("the difference is not a number")
	}
	return nil
}
