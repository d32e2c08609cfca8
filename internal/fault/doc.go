// Package fault marks the places where a panic would be most harmful (worker
// goroutines, a batch case, a watched case, each command) so that tests can
// make them panic on purpose and prove that the panic ends as an error of the
// comparison, a failed case, or exit status 1 with one line, never as a crash
// of the process. Outside tests it does nothing but one atomic load.
package fault
