// Package selection finds order statistics without sorting: Kth, the k-th
// smallest value of a slice in place (Hoare's selection, for the noise
// estimator's medians), and Radix, weighted order statistics of 32-bit keys
// in two passes and fixed memory (for the engine's Γ percentiles and the
// DVH metrics of large regions).
package selection

// Kth reorders v so that v[k] is its k-th smallest value (0-based),
// everything before it ≤ and everything after it ≥, and returns v[k]
// (Hoare's selection with a median-of-three pivot; expected linear time).
// v must hold no NaN and 0 ≤ k < len(v).
func Kth[T float32 | float64](v []T, k int) T {
	lo, hi := 0, len(v)-1
	for lo < hi {
		mid := lo + (hi-lo)/2
		// Median of three to the middle.
		if v[mid] < v[lo] {
			v[mid], v[lo] = v[lo], v[mid]
		}
		if v[hi] < v[lo] {
			v[hi], v[lo] = v[lo], v[hi]
		}
		if v[hi] < v[mid] {
			v[hi], v[mid] = v[mid], v[hi]
		}
		pivot := v[mid]
		i, j := lo, hi
		for i <= j {
			for v[i] < pivot {
				i++
			}
			for v[j] > pivot {
				j--
			}
			if i <= j {
				v[i], v[j] = v[j], v[i]
				i++
				j--
			}
		}
		switch {
		case k <= j:
			hi = j
		case k >= i:
			lo = i
		default:
			return v[k]
		}
	}
	return v[k]
}
