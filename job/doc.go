// Package job runs one voxgamma comparison from a protocol and settings to
// written output files: the unit of work that the compare command, the demo
// and batch runs share. It resolves a protocol (file or preset) and the
// caller's overrides into analysis settings, checks the requested outputs
// before any computation (never over an input, never over an existing file
// unless forced, directories that exist and are writable), runs the
// comparison and writes every output atomically, de-identified on request.
//
// It also says, before anything is loaded, how much memory a comparison
// will need and how much the process may use (memory.go): [EstimateBytes]
// from the grid sizes in the dose headers ([DoseSetVoxels]), and
// [DefaultBudget] and [AvailableCPUs] from the machine, its cgroup and the
// Slurm job it runs in. The compare, inspect, batch and watch commands
// check a comparison against that budget before they load it.
package job
