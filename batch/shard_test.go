package batch

import (
	"strings"
	"testing"
)

func TestShardSelect(t *testing.T) {
	var cases []Case
	for i := range 10 {
		cases = append(cases, Case{ID: string(rune('a' + i)), Index: i})
	}
	ids := func(cs []Case) string {
		var b strings.Builder
		for _, c := range cs {
			b.WriteString(c.ID)
		}
		return b.String()
	}
	for _, c := range []struct {
		s    Shard
		want string
	}{
		{Shard{0, 1, ""}, "abcdefghij"}, {Shard{}, "abcdefghij"},
		{Shard{0, 3, ""}, "adgj"}, {Shard{1, 3, ""}, "beh"}, {Shard{2, 3, ""}, "cfi"},
		{Shard{11, 12, ""}, ""},
	} {
		if got := ids(c.s.Select(cases)); got != c.want {
			t.Errorf("shard %v: %q, want %q", c.s, got, c.want)
		}
	}
	// Every case in exactly one shard.
	seen := map[string]int{}
	for i := range 4 {
		for _, c := range (Shard{Index: i, Count: 4}).Select(cases) {
			seen[c.ID]++
		}
	}
	for _, c := range cases {
		if seen[c.ID] != 1 {
			t.Errorf("case %s in %d shards", c.ID, seen[c.ID])
		}
	}
	if n := (Shard{Index: 2, Count: 5}).SummaryName(); n != "summary-shard-2-of-5.json" {
		t.Errorf("summary name %q", n)
	}
}

func TestParseShard(t *testing.T) {
	s, err := ParseShard("3/8")
	if err != nil || s.Index != 3 || s.Count != 8 {
		t.Fatalf("3/8: %+v %v", s, err)
	}
	for _, bad := range []string{"", "3", "8/8", "-1/4", "a/b", "1/0"} {
		if _, err := ParseShard(bad); err == nil {
			t.Errorf("%q accepted", bad)
		}
	}
}

func TestShardFromEnv(t *testing.T) {
	cases := []struct {
		name  string
		env   map[string]string
		count int
		want  Shard
		err   string
	}{
		{"none", nil, 0, Shard{0, 1, ""}, ""},
		{"slurm 0-based with count", map[string]string{"SLURM_ARRAY_TASK_ID": "4", "SLURM_ARRAY_TASK_COUNT": "10", "SLURM_ARRAY_TASK_MIN": "0", "SLURM_ARRAY_TASK_MAX": "9"}, 0, Shard{4, 10, "Slurm job array"}, ""},
		{"slurm 1-based", map[string]string{"SLURM_ARRAY_TASK_ID": "1", "SLURM_ARRAY_TASK_COUNT": "10", "SLURM_ARRAY_TASK_MIN": "1", "SLURM_ARRAY_TASK_MAX": "10"}, 0, Shard{0, 10, "Slurm job array"}, ""},
		{"slurm min/max only", map[string]string{"SLURM_ARRAY_TASK_ID": "7", "SLURM_ARRAY_TASK_MIN": "5", "SLURM_ARRAY_TASK_MAX": "9"}, 0, Shard{2, 5, "Slurm job array"}, ""},
		{"slurm count only", map[string]string{"SLURM_ARRAY_TASK_ID": "2", "SLURM_ARRAY_TASK_COUNT": "3"}, 0, Shard{2, 3, "Slurm job array"}, ""},
		{"slurm step", map[string]string{"SLURM_ARRAY_TASK_ID": "4", "SLURM_ARRAY_TASK_MIN": "0", "SLURM_ARRAY_TASK_MAX": "8", "SLURM_ARRAY_TASK_STEP": "2", "SLURM_ARRAY_TASK_COUNT": "5"}, 0, Shard{2, 5, "Slurm job array"}, ""},
		{"slurm list", map[string]string{"SLURM_ARRAY_TASK_ID": "5", "SLURM_ARRAY_TASK_MIN": "1", "SLURM_ARRAY_TASK_MAX": "9", "SLURM_ARRAY_TASK_COUNT": "3"}, 0, Shard{}, "list of task IDs"},
		{"slurm no count", map[string]string{"SLURM_ARRAY_TASK_ID": "5"}, 0, Shard{}, "cannot tell the number of shards"},
		{"slurm not a number", map[string]string{"SLURM_ARRAY_TASK_ID": "x"}, 0, Shard{}, "not an integer"},
		{"slurm wins over k8s", map[string]string{"SLURM_ARRAY_TASK_ID": "1", "SLURM_ARRAY_TASK_COUNT": "2", "JOB_COMPLETION_INDEX": "0"}, 5, Shard{1, 2, "Slurm job array"}, ""},
		{"k8s with flag", map[string]string{"JOB_COMPLETION_INDEX": "3", "VOXGAMMA_SHARD_COUNT": "9"}, 4, Shard{3, 4, "Kubernetes indexed job"}, ""},
		{"k8s with env", map[string]string{"JOB_COMPLETION_INDEX": "3", "VOXGAMMA_SHARD_COUNT": "9"}, 0, Shard{3, 9, "Kubernetes indexed job"}, ""},
		{"k8s no count", map[string]string{"JOB_COMPLETION_INDEX": "3"}, 0, Shard{}, "--shard-count"},
		{"k8s index too large", map[string]string{"JOB_COMPLETION_INDEX": "4"}, 4, Shard{}, "0 <= index < count"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := ShardFromEnv(func(k string) string { return c.env[k] }, c.count)
			if c.err != "" {
				if err == nil || !strings.Contains(err.Error(), c.err) {
					t.Fatalf("got %+v, %v; want an error with %q", got, err, c.err)
				}
				return
			}
			if err != nil || got != c.want {
				t.Fatalf("got %+v, %v; want %+v", got, err, c.want)
			}
		})
	}
}
