package batch

import "testing"

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
