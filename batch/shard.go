package batch

import (
	"fmt"
	"strconv"
	"strings"
)

// Shard selects every Count-th case of a manifest starting at Index
// (0-based): cases Index, Index+Count, Index+2·Count, ... in manifest order.
// The zero value and {0, 1} select every case.
type Shard struct {
	// Index is the 0-based shard number, below Count.
	Index int `json:"index"`
	// Count is the number of shards.
	Count int `json:"count"`
	// Source says where the shard came from: "--shard", "Slurm job array",
	// "Kubernetes indexed job" or "" (not sharded).
	Source string `json:"source,omitempty"`
}

// Sharded reports whether the shard is a proper part of the manifest
// (Count > 1): a sharded run writes a per-shard summary, never the shared
// one.
func (s Shard) Sharded() bool { return s.Count > 1 }

// String is "i/n".
func (s Shard) String() string { return fmt.Sprintf("%d/%d", s.Index, max(s.Count, 1)) }

// Select returns the cases of the shard, in manifest order.
func (s Shard) Select(cases []Case) []Case {
	if !s.Sharded() {
		return cases
	}
	var out []Case
	for i := s.Index; i < len(cases); i += s.Count {
		out = append(out, cases[i])
	}
	return out
}

// SummaryName is the file name of the shard's summary:
// "summary-shard-i-of-n.json".
func (s Shard) SummaryName() string {
	return fmt.Sprintf("summary-shard-%d-of-%d.json", s.Index, s.Count)
}

func (s Shard) check() error {
	if s.Count < 1 || s.Index < 0 || s.Index >= s.Count {
		return fmt.Errorf("shard %d/%d: want 0 <= index < count", s.Index, s.Count)
	}
	return nil
}

// ParseShard parses "i/n" (0 <= i < n).
func ParseShard(v string) (Shard, error) {
	a, b, ok := strings.Cut(strings.TrimSpace(v), "/")
	i, err1 := strconv.Atoi(strings.TrimSpace(a))
	n, err2 := strconv.Atoi(strings.TrimSpace(b))
	if !ok || err1 != nil || err2 != nil {
		return Shard{}, fmt.Errorf("--shard %q: want INDEX/COUNT with a 0-based index, e.g. 0/4", v)
	}
	s := Shard{Index: i, Count: n, Source: "--shard"}
	if err := s.check(); err != nil {
		return Shard{}, fmt.Errorf("--shard %q: want 0 <= INDEX < COUNT", v)
	}
	return s, nil
}

// ShardFromEnv finds the shard of this process when no --shard is given,
// in this order of precedence:
//
//  1. a Slurm job array: SLURM_ARRAY_TASK_ID, with the index counted from
//     SLURM_ARRAY_TASK_MIN (0 when absent) in steps of
//     SLURM_ARRAY_TASK_STEP (1 when absent), and the count from
//     SLURM_ARRAY_TASK_COUNT, or else from SLURM_ARRAY_TASK_MAX as
//     (MAX − MIN)/STEP + 1. An array given as a list ("--array=1,5,9"),
//     whose count does not agree with MIN, MAX and STEP, is refused: give
//     --shard.
//  2. a Kubernetes Indexed Job: JOB_COMPLETION_INDEX, with the count from
//     countFlag (--shard-count) when above 0, else the environment
//     variable VOXGAMMA_SHARD_COUNT (the Job's completions); without a
//     count it is an error.
//  3. neither: the whole manifest (Shard{0, 1}).
//
// getenv is os.Getenv in the program (a map's lookup in tests).
func ShardFromEnv(getenv func(string) string, countFlag int) (Shard, error) {
	num := func(name string, def int) (int, bool, error) {
		v := strings.TrimSpace(getenv(name))
		if v == "" {
			return def, false, nil
		}
		n, err := strconv.Atoi(v)
		if err != nil {
			return 0, true, fmt.Errorf("%s=%q is not an integer", name, v)
		}
		return n, true, nil
	}
	if id, ok, err := num("SLURM_ARRAY_TASK_ID", 0); err != nil {
		return Shard{}, err
	} else if ok {
		lo, _, err := num("SLURM_ARRAY_TASK_MIN", 0)
		if err != nil {
			return Shard{}, err
		}
		step, _, err := num("SLURM_ARRAY_TASK_STEP", 1)
		if err != nil {
			return Shard{}, err
		}
		if step < 1 {
			return Shard{}, fmt.Errorf("SLURM_ARRAY_TASK_STEP=%d: want 1 or more", step)
		}
		hi, hiOK, err := num("SLURM_ARRAY_TASK_MAX", 0)
		if err != nil {
			return Shard{}, err
		}
		count, countOK, err := num("SLURM_ARRAY_TASK_COUNT", 0)
		if err != nil {
			return Shard{}, err
		}
		derived := 0
		if hiOK {
			derived = (hi-lo)/step + 1
		}
		switch {
		case countOK && hiOK && count != derived:
			return Shard{}, fmt.Errorf("Slurm array with %d tasks between %d and %d in steps of %d: a list of task IDs cannot be mapped to shards; use --array=A-B (optionally :STEP) or give --shard", count, lo, hi, step)
		case !countOK && !hiOK:
			return Shard{}, fmt.Errorf("SLURM_ARRAY_TASK_ID=%d without SLURM_ARRAY_TASK_COUNT or SLURM_ARRAY_TASK_MAX: cannot tell the number of shards; give --shard", id)
		case !countOK:
			count = derived
		}
		if (id-lo)%step != 0 {
			return Shard{}, fmt.Errorf("SLURM_ARRAY_TASK_ID=%d is not on the array's steps (min %d, step %d)", id, lo, step)
		}
		s := Shard{Index: (id - lo) / step, Count: count, Source: "Slurm job array"}
		if err := s.check(); err != nil {
			return Shard{}, fmt.Errorf("Slurm job array task %d (min %d, step %d, count %d): %w", id, lo, step, count, err)
		}
		return s, nil
	}
	if idx, ok, err := num("JOB_COMPLETION_INDEX", 0); err != nil {
		return Shard{}, err
	} else if ok {
		count := countFlag
		if count <= 0 {
			c, cok, err := num("VOXGAMMA_SHARD_COUNT", 0)
			if err != nil {
				return Shard{}, err
			}
			if !cok {
				return Shard{}, fmt.Errorf("JOB_COMPLETION_INDEX=%d (a Kubernetes Indexed Job) but no shard count: give --shard-count N or set VOXGAMMA_SHARD_COUNT to the Job's completions", idx)
			}
			count = c
		}
		s := Shard{Index: idx, Count: count, Source: "Kubernetes indexed job"}
		if err := s.check(); err != nil {
			return Shard{}, fmt.Errorf("Kubernetes indexed job: %w", err)
		}
		return s, nil
	}
	return Shard{Index: 0, Count: 1}, nil
}
