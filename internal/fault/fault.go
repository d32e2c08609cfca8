package fault

import "sync/atomic"

var hook atomic.Pointer[func(site string)]

// Point calls the hook a test installed, if any, with the name of the place
// reached. The hook may panic (that is its purpose) or record the call.
func Point(site string) {
	if h := hook.Load(); h != nil {
		(*h)(site)
	}
}

// SetForTest installs f as the hook and returns a function that removes it.
// Only tests call it.
func SetForTest(f func(site string)) (restore func()) {
	hook.Store(&f)
	return func() { hook.Store(nil) }
}

// Sites named by the program, for tests to aim at.
const (
	// GammaWorker: a gamma search worker goroutine, once per block.
	GammaWorker = "gamma.worker"
	// ReferenceReader: the goroutine that reads the reference dose while
	// the evaluated dose is read (analysis.Load).
	ReferenceReader = "analysis.reference-reader"
	// KDTreeHelper: a helper goroutine of the k-d tree build.
	KDTreeHelper = "kdtree.helper"
	// BatchCase: a batch worker goroutine, before a case's memory estimate.
	BatchCase = "batch.case"
	// WatchCase: the watcher, before it reads a settled case.
	WatchCase = "watch.case"
	// Command: the start of a command's work (name appended: "command compare").
	Command = "command"
	// JobWriteStaged: job.Write, after each output is staged and before any
	// is renamed into place.
	JobWriteStaged = "job.write.staged"
)
