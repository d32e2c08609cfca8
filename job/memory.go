package job

import (
	"bufio"
	"bytes"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"

	"voxgamma/dicomio"
)

// Memory estimate coefficients (bytes). See [EstimateBytes]: a comparison
// peaks either while the engine runs or after it, while the ROIs'
// figures, the statistics and the clusters are made.
const (
	// EngineBytesPerReferenceVoxel: while the engine runs, the reference
	// grid (4, float32), Γ per point (4, which the Γ map shares) and its
	// status (1), and a margin of 2 for the ROIs, which the noise
	// correction rasterises before its second comparison. An ROI is held
	// as runs of voxels (12 bytes a run, about one a row of the grid that
	// it crosses) and the fractions of its surface voxels (8 bytes each):
	// a body outline on a 256-voxel-wide grid takes about 0.25 bytes a
	// grid voxel, so the margin holds eight such ROIs; a structure set's
	// small ROIs take far less each.
	EngineBytesPerReferenceVoxel = 4 + 4 + 1 + 2
	// EngineBytesPerEvaluatedVoxel: while the engine runs, the evaluated
	// grid (4, float32), the cubic B-spline's padded coefficients (4,
	// float32) and per-cell dose bounds (2, a byte each side), and a margin
	// of 3 for the k-d tree. The tree holds the evaluated nodes near the
	// points that fail at home with no neighbour to start from (25 bytes a
	// node: its coordinates, index and split axis, and the list of nodes;
	// and one bit an evaluated voxel to select them): 0.7 byte an
	// evaluated voxel on the failing case of the sweep of BENCHMARKS.md
	// (236 916 nodes of 10.6 M). The margin holds a tree over a ninth of
	// the evaluated grid; a dose where most points fail at home with no
	// neighbour would take more. The noise correction's maps (the
	// smoothed dose, the denoised dose and its variance) are made between
	// its two comparisons, when neither the engine's structures nor the
	// ROIs' figures are held, and its second comparison lets go of the
	// denoised dose once the engine has built its interpolant: its peak is
	// that of one comparison.
	EngineBytesPerEvaluatedVoxel = 4 + 4 + 2 + 3
	// AfterBytesPerReferenceVoxel: after the engine, the reference grid
	// (4), Γ (4) and its status (1), the evaluated dose resampled onto the
	// reference grid (4, turned into the difference map in place once the
	// ROIs' figures are made), the Γ values selected for one ROI's
	// statistics (up to 4, for a body-sized ROI with every point above the
	// threshold) and the ROIs' margin (2). The DVHs are summarised as they
	// are read, in a few megabytes (roi.RegionSummary), and the clusters
	// label the failing points only.
	AfterBytesPerReferenceVoxel = 4 + 4 + 1 + 4 + 4 + 2
	// AfterBytesPerEvaluatedVoxel: after the engine, the evaluated grid as
	// read (4), which the report and sub-grid ROIs read again.
	AfterBytesPerEvaluatedVoxel = 4
	// FixedBytesPerCase covers decoding buffers, the result document and
	// the review page's figures.
	FixedBytesPerCase = 16 << 20
	// DefaultBudgetFraction is the share of the available memory a batch
	// uses by default.
	DefaultBudgetFraction = 0.70
	// FallbackBudget is the budget used when the available memory cannot
	// be read (no /proc/meminfo).
	FallbackBudget = 2 << 30
)

// EstimateBytes is the estimated peak memory of one comparison whose
// reference grid has nr voxels and whose evaluated grid has ne voxels, the
// larger of its two phases:
//
//	max(EngineBytesPerReferenceVoxel·nr + EngineBytesPerEvaluatedVoxel·ne,
//	    AfterBytesPerReferenceVoxel·nr + AfterBytesPerEvaluatedVoxel·ne) + FixedBytesPerCase
//	= max(11·nr + 13·ne, 19·nr + 4·ne) + 16 MiB
//
// It is an admission estimate of the live heap's peak with a body-sized
// ROI, measured (BENCHMARKS.md, "Fast when it matters"); with small ROIs
// or none the comparison needs less. The Go runtime may take more than the
// live heap between collections (up to twice as much with its default
// settings); every command sets the runtime's soft memory limit to the
// budget so that it collects before exceeding it.
func EstimateBytes(nr, ne int64) int64 {
	engine := EngineBytesPerReferenceVoxel*nr + EngineBytesPerEvaluatedVoxel*ne
	after := AfterBytesPerReferenceVoxel*nr + AfterBytesPerEvaluatedVoxel*ne
	return max(engine, after) + FixedBytesPerCase
}

// DoseVoxels returns the voxel count of the RT Dose at path, read from its
// header only (Rows × Columns × NumberOfFrames). For a folder it is the
// largest dose in it (the one compared is chosen later).
func DoseVoxels(path string) (int64, error) {
	st, err := os.Stat(path)
	if err != nil {
		return 0, err
	}
	if !st.IsDir() {
		info, err := dicomio.ReadDoseInfo(path)
		if err != nil {
			return 0, err
		}
		return int64(info.Rows) * int64(info.Columns) * int64(max(info.NumberOfFrames, 1)), nil
	}
	entries, err := os.ReadDir(path)
	if err != nil {
		return 0, err
	}
	var best int64
	found := false
	for _, e := range entries {
		if e.IsDir() {
			continue
		}
		info, err := dicomio.ReadDoseInfo(filepath.Join(path, e.Name()))
		if err != nil {
			continue
		}
		found = true
		best = max(best, int64(info.Rows)*int64(info.Columns)*int64(max(info.NumberOfFrames, 1)))
	}
	if !found {
		return 0, fmt.Errorf("%s: no readable RT Dose file in the folder", path)
	}
	return best, nil
}

// DoseSetVoxels returns the voxel count of the dose given as paths: one
// file or folder (see [DoseVoxels]), or several files to sum, whose grid
// is the common grid of the sum (see dicomio.ReadDoseSet) or, when they
// cannot be summed (refused later, with the reason), the largest of them.
func DoseSetVoxels(paths []string) (int64, error) {
	if len(paths) == 1 {
		return DoseVoxels(paths[0])
	}
	var best int64
	for _, p := range paths {
		n, err := DoseVoxels(p)
		if err != nil {
			return 0, err
		}
		best = max(best, n)
	}
	if set, err := dicomio.ReadDoseSet(paths); err == nil {
		best = max(best, set.Voxels())
	}
	return best, nil
}

// ParseBytes parses a memory size: a number with an optional unit B, KB,
// MB, GB, TB (powers of 1000) or KiB, MiB, GiB, TiB (powers of 1024), K, M,
// G, T (powers of 1024, as schedulers write them), case-insensitive,
// e.g. "8GiB", "512MiB", "4G", "1500000000".
func ParseBytes(s string) (int64, error) {
	t := strings.TrimSpace(s)
	i := len(t)
	for i > 0 && (t[i-1] < '0' || t[i-1] > '9') && t[i-1] != '.' {
		i--
	}
	num, unit := strings.TrimSpace(t[:i]), strings.ToLower(strings.TrimSpace(t[i:]))
	mult := map[string]float64{"": 1, "b": 1,
		"kb": 1e3, "mb": 1e6, "gb": 1e9, "tb": 1e12,
		"kib": 1 << 10, "mib": 1 << 20, "gib": 1 << 30, "tib": 1 << 40,
		"k": 1 << 10, "m": 1 << 20, "g": 1 << 30, "t": 1 << 40}[unit]
	v, err := strconv.ParseFloat(num, 64)
	if err != nil || mult == 0 || !(v > 0) || math.IsInf(v*mult, 0) || v*mult > math.MaxInt64/2 {
		return 0, fmt.Errorf("memory size %q: want a positive number with a unit such as 512MiB, 8GiB or 4G", s)
	}
	return int64(v * mult), nil
}

// FormatBytes writes n in binary units with three significant digits
// ("1.50 GiB").
func FormatBytes(n int64) string {
	v := float64(n)
	for _, u := range []string{"B", "KiB", "MiB", "GiB", "TiB"} {
		if v < 1024 || u == "TiB" {
			if u == "B" {
				return fmt.Sprintf("%d B", n)
			}
			return fmt.Sprintf("%.3g %s", v, u)
		}
		v /= 1024
	}
	return fmt.Sprintf("%d B", n)
}

// DefaultBudget returns the default memory budget of a batch and a phrase
// saying where it came from: DefaultBudgetFraction of the memory available,
// which is MemAvailable from /proc/meminfo, lowered to the room left under
// the process's cgroup memory limit (cgroup v2 memory.max less
// memory.current, or v1 memory.limit_in_bytes less memory.usage_in_bytes)
// when there is one, as under Slurm or Kubernetes. Without /proc/meminfo it
// is FallbackBudget.
func DefaultBudget() (int64, string) {
	avail, ok := memAvailable("/proc/meminfo")
	if !ok {
		return FallbackBudget, fmt.Sprintf("%s (fallback: /proc/meminfo not readable)", FormatBytes(FallbackBudget))
	}
	source := "MemAvailable"
	if room, ok := cgroupRoom(); ok && room < avail {
		avail, source = room, "the cgroup memory limit"
	}
	if mem, what, ok := schedulerMemory(os.Getenv); ok && mem < avail {
		avail, source = mem, what
	}
	b := int64(float64(avail) * DefaultBudgetFraction)
	return b, fmt.Sprintf("%s (%.0f %% of %s of %s)", FormatBytes(b), DefaultBudgetFraction*100, FormatBytes(avail), source)
}

func memAvailable(path string) (int64, bool) {
	data, err := os.ReadFile(path)
	if err != nil {
		return 0, false
	}
	sc := bufio.NewScanner(bytes.NewReader(data))
	for sc.Scan() {
		f := strings.Fields(sc.Text())
		if len(f) >= 2 && f[0] == "MemAvailable:" {
			kb, err := strconv.ParseInt(f[1], 10, 64)
			if err != nil || kb <= 0 {
				return 0, false
			}
			return kb << 10, true
		}
	}
	return 0, false
}

func readInt(path string) (int64, bool) {
	data, err := os.ReadFile(path)
	if err != nil {
		return 0, false
	}
	v, err := strconv.ParseInt(strings.TrimSpace(string(data)), 10, 64)
	return v, err == nil
}

// cgroupRoom returns the least memory left under a cgroup limit of this
// process's cgroup or any of its ancestors, when one sets a limit: the
// cgroup v2 memory.max less memory.current, or for cgroup v1
// memory.limit_in_bytes less memory.usage_in_bytes. The cgroup's path is
// read from /proc/self/cgroup (a job's cgroup under Slurm, a container's
// under Kubernetes).
func cgroupRoom() (int64, bool) {
	data, err := os.ReadFile("/proc/self/cgroup")
	if err != nil {
		return 0, false
	}
	best, found := int64(math.MaxInt64), false
	try := func(root, rel, limitName, usageName string) {
		dir := filepath.Join(root, filepath.FromSlash(rel))
		for {
			limit, ok := readInt(filepath.Join(dir, limitName)) // "max" does not parse: no limit
			if ok && limit > 0 && limit < 1<<60 {
				used, _ := readInt(filepath.Join(dir, usageName))
				room := limit - min(max(used, 0), limit)
				if room < best {
					best, found = room, true
				}
			}
			if dir == root || !strings.HasPrefix(dir, root) {
				return
			}
			dir = filepath.Dir(dir)
		}
	}
	for _, line := range strings.Split(string(data), "\n") {
		parts := strings.SplitN(line, ":", 3)
		if len(parts) != 3 {
			continue
		}
		switch {
		case parts[0] == "0" && parts[1] == "":
			try("/sys/fs/cgroup", parts[2], "memory.max", "memory.current")
		case strings.Contains(","+parts[1]+",", ",memory,"):
			try("/sys/fs/cgroup/memory", parts[2], "memory.limit_in_bytes", "memory.usage_in_bytes")
		}
	}
	return best, found
}

// schedulerMemory returns the memory a Slurm job was given, from the
// environment sbatch sets: SLURM_MEM_PER_NODE (--mem), or SLURM_MEM_PER_CPU
// (--mem-per-cpu) times SLURM_CPUS_PER_TASK (or 1), both in megabytes
// (Slurm's sbatch documentation, "OUTPUT ENVIRONMENT VARIABLES"; from
// memory). On a cluster that sets no memory cgroup this is the only limit
// the job can see.
func schedulerMemory(getenv func(string) string) (int64, string, bool) {
	mb := func(name string) (int64, bool) {
		v, err := strconv.ParseInt(strings.TrimSpace(getenv(name)), 10, 64)
		return v, err == nil && v > 0
	}
	if v, ok := mb("SLURM_MEM_PER_NODE"); ok {
		return v << 20, "Slurm's --mem (SLURM_MEM_PER_NODE)", true
	}
	if v, ok := mb("SLURM_MEM_PER_CPU"); ok {
		cpus := int64(1)
		if c, ok := mb("SLURM_CPUS_PER_TASK"); ok {
			cpus = c
		}
		return v * cpus << 20, "Slurm's --mem-per-cpu × --cpus-per-task", true
	}
	return 0, "", false
}

// AvailableCPUs returns the CPUs this process may use: SLURM_CPUS_PER_TASK
// when a Slurm job sets it (--cpus-per-task; sbatch sets it only when the
// option is given), which a cluster without CPU binding does not enforce,
// else runtime.NumCPU().
func AvailableCPUs() int {
	return availableCPUs(os.Getenv, runtime.NumCPU())
}

func availableCPUs(getenv func(string) string, numCPU int) int {
	if v, err := strconv.Atoi(strings.TrimSpace(getenv("SLURM_CPUS_PER_TASK"))); err == nil && v > 0 {
		return min(v, numCPU)
	}
	return numCPU
}
