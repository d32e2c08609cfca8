package volume_test

import (
	"fmt"

	"voxgamma/volume"
)

// A set of grid positions is built in increasing order and kept as runs;
// Ranked splits it into parts of equal counts.
func ExampleRuns() {
	var s volume.Runs
	for _, n := range []int32{3, 4, 5, 9, 10, 20} {
		s.Add(n)
	}
	fmt.Println(s.Len(), s.Runs())
	fmt.Println(s.Contains(4), s.Contains(6))
	for run := range s.Ranked(2, 5) {
		fmt.Println(run)
	}
	// Output:
	// 6 [{3 6} {9 11} {20 21}]
	// true false
	// {5 6}
	// {9 11}
}
