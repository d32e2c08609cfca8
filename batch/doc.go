// Package batch runs many voxgamma comparisons unattended: a manifest of
// cases run in parallel within a memory budget (Run), split into shards
// for a cluster scheduler and merged again (Shard, Merge), and an export
// folder watched for cases as a planning system or recalculation engine
// drops them (Watcher). Each case is one job.Compare with its outputs
// written into a folder of its own; nothing is lost or done twice.
//
// # Case folders
//
// A case with id ID is written to OUT/cases/ID/: result.json, result.csv,
// the optional gamma.dcm, difference.dcm, report.html and report.pdf, and status.json
// (see [Status]: the inputs with their SHA-256, the settings hash, the
// verdict, the exit class, the error, the seconds). The folder is built in
// OUT/cases/.ID.tmp-* and renamed into place when complete (a previous
// folder is renamed aside to .ID.old-* first and removed after), so a run
// killed at any instant leaves either the old case or the new one, never a
// half one. A run starts by removing the .ID.tmp-* folders of its own cases
// and putting back a .ID.old-* folder whose replacement never arrived;
// temporary folders of cases it does not own (another shard's, which may
// be live) are left alone. Every file is written atomically
// (internal/atomicfile).
//
// # Resume rule
//
// A case is skipped when its folder holds a status.json whose verdict is
// pass or fail, whose inputs are the case's inputs by role and content, the
// same SHA-256 whatever their paths (a folder input hashes its regular
// files, by name), whose
// settings hash is the run's, and whose listed outputs all exist. The
// settings hash ([SettingsHash]) is the SHA-256 of a canonical JSON document
// (fixed field order, shortest number forms) of everything besides the
// inputs that decides the outputs: the voxgamma version, the protocol's
// content (so a changed protocol file reruns its cases and a mere comment
// does not), the criteria and analysis settings as resolved, and the output
// options; not the worker count, which does not change results. Any other
// case is computed, and cases that could not be evaluated are always tried
// again (their error may have been passing: a file still being copied,
// memory).
//
// # Memory estimate
//
// Before a case is loaded its need is estimated from the grid sizes in the
// dose headers (dicomio.ReadDoseInfo: Rows × Columns × NumberOfFrames), see
// [job.EstimateBytes]:
//
//	need = max(11·Nref + 13·Neval, 19·Nref + 4·Neval) + 16 MiB
//
// the larger of a comparison's two phases: while the engine runs (per
// reference voxel the reference grid, Γ and its status, and a 2-byte margin
// for the ROIs, held as runs of voxels; per evaluated voxel the grid, the spline's coefficients and
// cell bounds, and a 3-byte k-d tree margin) and after it (per reference
// voxel the reference grid, Γ and its status, the resampled evaluated dose
// that becomes the difference map, the Γ values of one ROI's statistics,
// and the ROIs' margin; per evaluated voxel the grid).
// The coefficients are job's (memory.go), measured against the peak.
//
// Cases run at once while the sum of their needs fits the budget (a
// weighted semaphore, first come first served); a case needing more than
// the whole budget is an error naming its need and the budget. The default
// budget ([job.DefaultBudget]) is 70 % of MemAvailable from /proc/meminfo, or
// of the room under the process's cgroup memory limit when that is less
// (the limit a Slurm job or a Kubernetes container runs under), and 2 GiB
// when /proc/meminfo cannot be read.
//
// # Shard rule
//
// Shard i of n (0-based) runs the cases at manifest positions i, i+n,
// i+2n, ...: every case in exactly one shard, the shards' sizes differing
// by at most one, the same split whatever the machine. A shard writes only
// its cases' folders and OUT/summary-shard-i-of-n.json, never the shared
// summary, so shards writing into one folder on a shared filesystem do not
// race. [Merge] builds the one summary from the case folders (never from
// the shard summaries), so it is right however the shards were retried or
// resumed. [ShardFromEnv] reads the shard of a Slurm job array or a
// Kubernetes Indexed Job.
//
// # Watched folders
//
// A [Watcher] polls a folder (no platform notification): the files directly
// in it are grouped into cases by frame of reference, and each immediate
// subfolder is one case. A folder is read only when every file in it has
// kept its size and modification time for the settle time, as seen by two
// scans at least; when nothing
// changed since it was last handled a poll costs one stat per file. Each
// case is processed once, also across restarts, as recorded in the state
// file by the fingerprint of its files (paths, sizes, modification times,
// SHA-256); broken cases are moved aside into DIR/.failed/. A case is
// recognised by the content of its files alone (their SHA-256), also when
// it is found finished in the output folder after a restart: it is then
// reported with its verdict. Case keys (output folder names) of the flat
// layout, of unreadable flat files and of altered folder names carry
// prefixes (for-, file-, x-) that a subfolder's own name keeps only when it
// starts with none of them, so no two cases share an output folder. A case
// estimated to need more than the memory budget is moved aside unread.
//
// # One run per output folder
//
// [Run] takes an advisory lock file in its output folder (one per shard)
// holding its PID and host, refreshed every LockHeartbeat: a second run
// whose cases overlap stops with an error naming the owner; a lock whose
// owner is gone (a dead PID on this host, or no refresh for LockStaleAfter
// from another host) is taken over with a log line. No output folder may
// hold, replace or lie inside an input ([CheckOut]).
//
// # De-identification
//
// With Outputs.Deidentify, every case's identifying values are scrubbed
// from its outputs, status (paths become roles, no dates), the log, the
// watch state (no names, keyed fingerprints) and watch case keys (keyed
// tokens); see package deid.
package batch
