package main

// End-to-end tests of the DICOM network path (issue 18, item 3): dcmtk's
// storescp, run by the shipped docs/dicom-network/voxgamma-receive with the
// shipped association profile, receives what dcmtk's storescu pushes into
// the folder voxgamma watch reads; the watch compares the case and sends its
// maps back to another storescp (--results-to). Without dcmtk the tests are
// skipped with a message, and fail when CI is set (internal/reftool).

import (
	"bufio"
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"voxgamma/batch"
	"voxgamma/dicomio"
	"voxgamma/internal/reftool"
	"voxgamma/internal/scptest"
	"voxgamma/phantom"
)

// networkDocs is the folder of the shipped receive examples.
var networkDocs = filepath.Join("..", "..", "docs", "dicom-network")

// networkCase is an invented case as a planning system and a recalculation
// engine would push it: a planning dose (SeriesDescription "... planning
// dose ..."), a Monte Carlo recalculation (".. recalc ..."), a structure set
// with a target and the RT Plan the doses name (prescription 2 Gy), all in
// one study and frame of reference.
type networkCase struct {
	ids               dicomio.Identifiers
	ref, eval, rs, rp string
	refInfo, evalInfo *dicomio.DoseInfo
	plan              *dicomio.Plan
}

// Uniform 2 Gy against 2.04 Gy: Γ = 0.02·2/(0.03·2) = 0.667 everywhere
// (uniform scale in a flat region), so every rule of tg218 is met.
func newNetworkCase(t *testing.T, dir string) networkCase {
	t.Helper()
	c := networkCase{ids: dicomio.PhantomIdentifiers("PHANTOM^NETWORK", "VG-NET-001")}
	c.ref, c.eval, c.rs, c.rp = filepath.Join(dir, "plan.dcm"), filepath.Join(dir, "mc.dcm"), filepath.Join(dir, "rs.dcm"), filepath.Join(dir, "rp.dcm")
	c.refInfo = writePartDose(t, c.ref, [3]int{12, 12, 8}, [3]float64{-11, -11, -7}, [3]float64{2, 2, 2}, phantom.Uniform(2), c.ids, "PLAN", 0, 0,
		func(o *dicomio.WriteOptions) { o.Description = "invented planning dose, Gy" }).info
	c.evalInfo = writePartDose(t, c.eval, [3]int{22, 22, 18}, [3]float64{-21, -21, -17}, [3]float64{2, 2, 2}, phantom.Uniform(2.04), c.ids, "PLAN", 0, 0,
		func(o *dicomio.WriteOptions) { o.Description = "invented Monte Carlo recalc dose, Gy" }).info
	writeTestStructures(t, c.rs, c.ids, sphereROI(t, "PTV", "PTV", 1, phantom.Sphere{Radius: 6}, c.ids.FrameOfReferenceUID))
	c.plan = writeTestPlan(t, c.rp, "VG_NET", c.ids, 2, false, 1, 2)
	return c
}

// storescu pushes files to 127.0.0.1:port in one association.
func storescu(t *testing.T, calling, called string, port int, files ...string) {
	t.Helper()
	prog := reftool.Program(t, "storescu", scptest.Install)
	args := append([]string{"--aetitle", calling, "--call", called, "--required", "127.0.0.1", strconv.Itoa(port)}, files...)
	if out, err := exec.Command(prog, args...).CombinedOutput(); err != nil {
		t.Fatalf("storescu %v: %v\n%s", args, err, out)
	}
}

// receiver runs the shipped voxgamma-receive in mode "all" and stops it
// (TERM to the script, which stops storescp and the watch; the process
// group is killed if that takes more than 20 s) when the test ends.
type receiver struct {
	cmd  *exec.Cmd
	out  *bytes.Buffer
	port int
	done chan error
}

func startReceiver(t *testing.T, env map[string]string) *receiver {
	t.Helper()
	script, err := filepath.Abs(filepath.Join(networkDocs, "voxgamma-receive"))
	if err != nil {
		t.Fatal(err)
	}
	r := &receiver{out: &bytes.Buffer{}, done: make(chan error, 1)}
	r.port, _ = strconv.Atoi(env["VOXGAMMA_PORT"])
	r.cmd = exec.Command("sh", script, "all")
	r.cmd.Env = os.Environ()
	for k, v := range env {
		r.cmd.Env = append(r.cmd.Env, k+"="+v)
	}
	r.cmd.Stdout, r.cmd.Stderr = r.out, r.out
	r.cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	if err := r.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() { r.done <- r.cmd.Wait() }()
	t.Cleanup(func() {
		r.cmd.Process.Signal(syscall.SIGTERM)
		select {
		case <-r.done:
		case <-time.After(20 * time.Second):
			syscall.Kill(-r.cmd.Process.Pid, syscall.SIGKILL)
			<-r.done
		}
	})
	scptest.WaitListening(t, r.port, 30*time.Second, func() error {
		select {
		case err := <-r.done:
			r.done <- err
			return &exec.ExitError{ProcessState: r.cmd.ProcessState}
		default:
			return nil
		}
	})
	return r
}

// waitFor polls until cond holds or fails the test after timeout, with
// what the receiver printed.
func waitFor(t *testing.T, what string, timeout time.Duration, r *receiver, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("%s: not after %s; voxgamma-receive printed:\n%s", what, timeout, r.out.String())
		}
		time.Sleep(200 * time.Millisecond)
	}
}

// The whole path: the shipped script runs storescp (shipped profile,
// per-study subfolders) and voxgamma watch; the planning system pushes the
// planning dose, the structure set and the RT Plan, the recalculation
// engine its dose in a second association; the watch compares the case
// once it has settled, normalised to the plan's prescription, writes
// RESULTS/study_<StudyInstanceUID>/ with the verdict of the closed form
// (pass) and the plan, and sends the gamma and difference maps to the QA
// node.
func TestNetworkReceiveWatchAndSendBack(t *testing.T) {
	storescp := reftool.Program(t, "storescp", scptest.Install)
	bin := buildBinary(t)
	work := t.TempDir()
	incoming, results, returned := filepath.Join(work, "incoming"), filepath.Join(work, "results"), filepath.Join(work, "returned")
	for _, d := range []string{incoming, results, returned} {
		os.Mkdir(d, 0o755)
	}
	qa := scptest.Start(t, "QA_ARCHIVE", returned)
	cfg, _ := filepath.Abs(filepath.Join(networkDocs, "storescp-voxgamma.cfg"))
	port := scptest.FreePort(t)
	r := startReceiver(t, map[string]string{
		"VOXGAMMA_AET": "VG_TEST_SCP", "VOXGAMMA_PORT": strconv.Itoa(port),
		"VOXGAMMA_INCOMING": incoming, "VOXGAMMA_RESULTS": results, "VOXGAMMA_LAYOUT": "study",
		"VOXGAMMA_SCP_CONFIG": cfg, "VOXGAMMA_SETTLE": "1s", "VOXGAMMA_POLL": "300ms", "VOXGAMMA_PROTOCOL": "tg218",
		"VOXGAMMA_REFERENCE_MATCH": "series:*planning*", "VOXGAMMA_EVALUATED_MATCH": "series:*recalc*;comment:*monte carlo*",
		"VOXGAMMA_RESULTS_TO": "QA_ARCHIVE@127.0.0.1:" + strconv.Itoa(qa.Port), "VOXGAMMA_RESULTS_AET": "VG_TEST",
		"VOXGAMMA_WATCH_OPTIONS": "--require-structures --norm-dose prescription", "VOXGAMMA": bin, "STORESCP": storescp,
	})
	c := newNetworkCase(t, t.TempDir())
	storescu(t, "TPS", "VG_TEST_SCP", port, c.ref, c.rs, c.rp)
	storescu(t, "MC_ENGINE", "VG_TEST_SCP", port, c.eval)

	study := "study_" + c.ids.StudyInstanceUID
	// storescp's per-study folder, files named <prefix>.<SOPInstanceUID>.dcm.
	for _, f := range []string{"RD." + c.refInfo.SOPInstanceUID + ".dcm", "RD." + c.evalInfo.SOPInstanceUID + ".dcm", "RP." + c.plan.SOPInstanceUID + ".dcm"} {
		if _, err := os.Stat(filepath.Join(incoming, study, f)); err != nil {
			t.Errorf("storescp did not write %s: %v", f, err)
		}
	}
	caseDir := filepath.Join(results, study)
	waitFor(t, "the case's status.json", 120*time.Second, r, func() bool {
		_, err := os.Stat(filepath.Join(caseDir, batch.StatusFile))
		return err == nil
	})
	st, err := batch.ReadStatus(caseDir)
	if err != nil {
		t.Fatal(err)
	}
	if st.Verdict != batch.VerdictPass {
		t.Fatalf("verdict %q (error %q), closed form: pass; voxgamma-receive printed:\n%s", st.Verdict, st.Error, r.out.String())
	}
	res := readResultJSON(t, filepath.Join(caseDir, batch.ResultJSON))
	roles := map[string]string{}
	for _, in := range res.Inputs {
		roles[in.Role] = in.SOPInstanceUID
	}
	if roles["reference"] != c.refInfo.SOPInstanceUID || roles["evaluated"] != c.evalInfo.SOPInstanceUID || roles["structures"] == "" || roles["plan"] != c.plan.SOPInstanceUID {
		t.Errorf("inputs %v: want the pushed planning dose as the reference, the recalculation as the evaluated dose, the structure set and the plan", roles)
	}
	if res.Plan == nil || res.Plan.Label != "VG_NET" || res.Plan.ReferenceDose != "names this plan" || res.Criteria.NormDoseSource != "prescription" || res.Criteria.NormDoseGy != 2 {
		t.Errorf("plan %+v, criteria %+v: want the pushed plan, its prescription the normalisation dose", res.Plan, res.Criteria)
	}
	checkGammaStats(t, "overall", res.Overall, repeat(0.02/0.03, 12*12*8), 1e-3)
	// The maps, back at the QA node.
	var maps []*dicomio.DoseInfo
	waitFor(t, "the maps at the QA node", 60*time.Second, r, func() bool {
		entries, _ := os.ReadDir(returned)
		maps = maps[:0]
		for _, e := range entries {
			if info, err := dicomio.ReadDoseInfo(filepath.Join(returned, e.Name())); err == nil {
				maps = append(maps, info)
			}
		}
		return len(maps) == 2
	})
	kinds := map[string]bool{}
	for _, m := range maps {
		if m.DoseType != "ERROR" || m.FrameOfReferenceUID != c.ids.FrameOfReferenceUID {
			t.Errorf("map %s: DoseType %s, frame %s", m.Path, m.DoseType, m.FrameOfReferenceUID)
		}
		kinds[strings.Fields(m.SeriesDescription)[0]+" "+m.DoseUnits] = true
	}
	if !kinds["gamma RELATIVE"] || !kinds["dose GY"] {
		t.Errorf("maps received: %v, want a gamma map (RELATIVE) and a dose difference map (GY)", kinds)
	}
	mustContain(t, "result notes", strings.Join(res.Notes, "\n"), "sent to QA_ARCHIVE@127.0.0.1:"+strconv.Itoa(qa.Port))
}

// compare --results-to sends the maps it writes (the same files), or maps
// written for the purpose; a node that cannot be reached leaves nothing
// written, with one line naming it.
func TestResultsToFromCompare(t *testing.T) {
	returned := t.TempDir()
	qa := scptest.Start(t, "QA_ARCHIVE", returned)
	c := newUniformCase(t, 2, 1.02)
	dest := "QA_ARCHIVE@127.0.0.1:" + strconv.Itoa(qa.Port)
	out := t.TempDir()
	g := filepath.Join(out, "gamma.dcm")
	vgExit(t, exitPass, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--gamma-map", g,
		"--difference-map", filepath.Join(out, "difference.mha"), "--json", filepath.Join(out, "r.json"), "--results-to", dest)
	gi, err := dicomio.ReadDoseInfo(g)
	if err != nil {
		t.Fatal(err)
	}
	// storescp names a received RT Dose "RD.<SOPInstanceUID>": the map sent
	// is the map written.
	if _, err := os.Stat(filepath.Join(returned, "RD."+gi.SOPInstanceUID)); err != nil {
		t.Errorf("the gamma map written was not the one sent: %v\nstorescp: %s", err, qa.Log())
	}
	if n := len(testDirNames(t, returned)); n != 2 {
		t.Errorf("%d files at the node, want the gamma and difference maps", n)
	}
	res := readResultJSON(t, filepath.Join(out, "r.json"))
	mustContain(t, "notes", strings.Join(res.Notes, "\n"), "the gamma and difference maps were sent to "+dest)

	// Unreachable: nothing written.
	empty := t.TempDir()
	down := "QA_ARCHIVE@127.0.0.1:" + strconv.Itoa(scptest.FreePort(t))
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures",
		"--json", filepath.Join(empty, "r.json"), "--results-to", down), "results not sent (nothing written)", down, "storescu failed")
	if names := testDirNames(t, empty); len(names) != 0 {
		t.Errorf("outputs left behind: %v", names)
	}
	for bad, want := range map[string]string{
		"QA_ARCHIVE":                  "want AET@HOST:PORT",
		"WAY_TOO_LONG_AE_TITLE@h:104": "longer than the 16 characters",
		"QA@127.0.0.1:0":              "port \"0\"",
	} {
		oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--results-to", bad), "--results-to", want)
	}
	oneErrorLine(t, vgExit(t, exitError, "compare", "--reference", c.ref, "--evaluated", c.eval, "--no-structures", "--results-to", dest, "--results-aet", `A\B`), "--results-aet", "backslash")
}

// The shipped systemd units pass systemd's own checker (systemd-analyze
// verify: unknown keys, bad values, missing programs) with their paths
// pointed at the shipped script and settings; the container example copies
// files that exist and starts the script it copies; the script's storescp
// options are storescp's (storescp --arguments expands and checks them
// without listening).
func TestShippedReceiveExamples(t *testing.T) {
	script, _ := filepath.Abs(filepath.Join(networkDocs, "voxgamma-receive"))
	env, _ := filepath.Abs(filepath.Join(networkDocs, "voxgamma-receive.env"))
	analyze := reftool.Program(t, "systemd-analyze", "apt-get install systemd")
	dir := t.TempDir()
	var units []string
	for _, u := range []string{"voxgamma-storescp.service", "voxgamma-watch.service"} {
		b, err := os.ReadFile(filepath.Join(networkDocs, u))
		if err != nil {
			t.Fatal(err)
		}
		s := strings.ReplaceAll(string(b), "/usr/local/lib/voxgamma/voxgamma-receive", script)
		s = strings.ReplaceAll(s, "/etc/voxgamma/voxgamma-receive.env", env)
		if !strings.Contains(s, "ExecStart="+script+" ") {
			t.Errorf("%s does not start the shipped script", u)
		}
		p := filepath.Join(dir, u)
		if err := os.WriteFile(p, []byte(s), 0o644); err != nil {
			t.Fatal(err)
		}
		units = append(units, p)
	}
	out, err := exec.Command(analyze, append([]string{"verify", "--man=no"}, units...)...).CombinedOutput()
	if err != nil || len(bytes.TrimSpace(out)) != 0 {
		t.Errorf("systemd-analyze verify: %v\n%s", err, out)
	}

	// Container example: every COPY source but the built binary exists,
	// and the entry point is the script copied.
	b, err := os.ReadFile(filepath.Join(networkDocs, "Containerfile"))
	if err != nil {
		t.Fatal(err)
	}
	copies := map[string]string{}
	sc := bufio.NewScanner(bytes.NewReader(b))
	for sc.Scan() {
		f := strings.Fields(sc.Text())
		if len(f) == 3 && f[0] == "COPY" {
			copies[f[2]] = f[1]
			if f[1] != "voxgamma" {
				if _, err := os.Stat(filepath.Join("..", "..", f[1])); err != nil {
					t.Errorf("Containerfile copies %s, which is not in the repository", f[1])
				}
			}
		}
	}
	m := regexp.MustCompile(`ENTRYPOINT \["([^"]+)", "all"\]`).FindSubmatch(b)
	if m == nil || copies[string(m[1])] != "docs/dicom-network/voxgamma-receive" {
		t.Errorf("Containerfile's entry point %q is not the copied voxgamma-receive (%v)", m, copies)
	}

	// Every setting the script reads is documented in the env file, with
	// the script's default.
	sb, _ := os.ReadFile(script)
	eb, _ := os.ReadFile(env)
	for _, d := range regexp.MustCompile(`: "\$\{(VOXGAMMA\w*|STORESCP):=([^}]*)\}"`).FindAllSubmatch(sb, -1) {
		name, def := string(d[1]), string(d[2])
		line := regexp.MustCompile(`(?m)^` + name + `=(.*)$`).FindSubmatch(eb)
		if line == nil {
			t.Errorf("%s is read by the script but not in voxgamma-receive.env", name)
			continue
		}
		if got := string(line[1]); got != def && !(name == "VOXGAMMA" || name == "STORESCP") {
			t.Errorf("voxgamma-receive.env says %s=%s, the script's default is %q", name, got, def)
		}
	}

	// storescp starts with the script's options and the shipped profile
	// (a bad option or profile ends it at once), in every layout.
	storescp := reftool.Program(t, "storescp", scptest.Install)
	cfg, _ := filepath.Abs(filepath.Join(networkDocs, "storescp-voxgamma.cfg"))
	for _, layout := range []string{"study", "association", "flat"} {
		port := scptest.FreePort(t)
		cmd := exec.Command("sh", script, "storescp")
		var log bytes.Buffer
		cmd.Stdout, cmd.Stderr = &log, &log
		cmd.Env = append(os.Environ(), "STORESCP="+storescp, "VOXGAMMA_SCP_CONFIG="+cfg, "VOXGAMMA_INCOMING="+filepath.Join(dir, "in"),
			"VOXGAMMA_LAYOUT="+layout, "VOXGAMMA_PORT="+strconv.Itoa(port))
		if err := cmd.Start(); err != nil {
			t.Fatal(err)
		}
		done := make(chan error, 1)
		go func() { done <- cmd.Wait() }()
		scptest.WaitListening(t, port, 20*time.Second, func() error {
			select {
			case err := <-done:
				done <- err
				return fmt.Errorf("layout %s: storescp ended: %v: %s", layout, err, log.String())
			default:
				return nil
			}
		})
		cmd.Process.Kill() // the script exec'd storescp: this is its process
		<-done
	}
	cmd := exec.Command("sh", script, "storescp")
	cmd.Env = append(os.Environ(), "STORESCP="+storescp, "VOXGAMMA_SCP_CONFIG="+cfg, "VOXGAMMA_INCOMING="+filepath.Join(dir, "in"), "VOXGAMMA_LAYOUT=daily")
	if out, err := cmd.CombinedOutput(); err == nil || !strings.Contains(string(out), "want study, association or flat") {
		t.Errorf("an unknown layout: %v\n%s", err, out)
	}
}
