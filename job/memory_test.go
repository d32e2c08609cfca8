package job

import (
	"os"
	"testing"
)

// TestSchedulerLimits: the CPUs and memory a Slurm job was given are read
// from the environment sbatch sets (Slurm's sbatch documentation, from
// memory: SLURM_CPUS_PER_TASK set only with --cpus-per-task,
// SLURM_MEM_PER_NODE and SLURM_MEM_PER_CPU in megabytes).
func TestSchedulerLimits(t *testing.T) {
	env := func(kv ...string) func(string) string {
		return func(k string) string {
			for i := 0; i+1 < len(kv); i += 2 {
				if kv[i] == k {
					return kv[i+1]
				}
			}
			return ""
		}
	}
	if got := availableCPUs(env(), 8); got != 8 {
		t.Errorf("no Slurm: %d CPUs", got)
	}
	if got := availableCPUs(env("SLURM_CPUS_PER_TASK", "1"), 8); got != 1 {
		t.Errorf("--cpus-per-task 1: %d CPUs", got)
	}
	if got := availableCPUs(env("SLURM_CPUS_PER_TASK", "16"), 8); got != 8 {
		t.Errorf("more than the machine has: %d CPUs", got)
	}
	if _, _, ok := schedulerMemory(env()); ok {
		t.Error("no Slurm: a memory limit")
	}
	if b, _, ok := schedulerMemory(env("SLURM_MEM_PER_NODE", "900")); !ok || b != 900<<20 {
		t.Errorf("--mem 900M: %d", b)
	}
	if b, _, ok := schedulerMemory(env("SLURM_MEM_PER_CPU", "512", "SLURM_CPUS_PER_TASK", "2")); !ok || b != 1024<<20 {
		t.Errorf("--mem-per-cpu 512M × 2: %d", b)
	}
}

func TestParseBytes(t *testing.T) {
	for s, want := range map[string]int64{"8GiB": 8 << 30, "512MiB": 512 << 20, "4G": 4 << 30, "1.5GiB": 3 << 29,
		"1000": 1000, "2 GB": 2e9, "64kib": 64 << 10} {
		got, err := ParseBytes(s)
		if err != nil || got != want {
			t.Errorf("%q: %d, %v; want %d", s, got, err, want)
		}
	}
	for _, bad := range []string{"", "GiB", "-1GiB", "0", "8 parsecs", "1e30TiB"} {
		if _, err := ParseBytes(bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
	if s := FormatBytes(3 << 29); s != "1.5 GiB" {
		t.Errorf("FormatBytes: %q", s)
	}
}

func TestMemAvailable(t *testing.T) {
	dir := t.TempDir()
	path := dir + "/meminfo"
	if err := os.WriteFile(path, []byte("MemTotal:       24000000 kB\nMemFree:  100 kB\nMemAvailable:   20000000 kB\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if v, ok := memAvailable(path); !ok || v != 20000000<<10 {
		t.Errorf("memAvailable: %d %v", v, ok)
	}
	if err := os.WriteFile(path, []byte("MemTotal: 5 kB\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, ok := memAvailable(path); ok {
		t.Error("a meminfo without MemAvailable was read")
	}
	if b, src := DefaultBudget(); b <= 0 || src == "" {
		t.Errorf("DefaultBudget: %d %q", b, src)
	}
}
