package selection

import (
	"math"
	"sync"
)

// digitBits is the width of each of the two digits of a Radix's 32-bit
// keys.
const digitBits = 16

// Radix finds weighted order statistics of 32-bit keys in two passes over
// them (a radix selection on two 16-bit digits), in memory that does not
// grow with their number: 512 kB for the first digit and as much for each
// bucket of it asked about.
//
// In the first pass, Add every key with its weight (Merge adds up passes
// made in parts); Want then registers a threshold of cumulative weight. In
// the second pass, AddLow every key again (Shard and MergeLow for parts);
// Key then returns, for each threshold, the smallest key whose cumulative
// weight (of the keys at or below it) reaches it. Weights that are whole
// numbers below 2⁵³ (counts) are summed exactly, in any order.
type Radix struct {
	hist []float64
	// Per threshold: its value, its bucket and the weight of the buckets
	// below it; low holds the second digit's weights of each bucket asked
	// about (shared by thresholds in the same bucket).
	target, before []float64
	bucket         []int
	low            map[int][]float64
}

// NewRadix returns a Radix ready for its first pass. Release hands its
// memory back for the next one.
func NewRadix() *Radix { return &Radix{hist: digitCounts()} }

// digits holds released 512 kB count arrays (*[]float64 of 2¹⁶ zeros):
// a report summarises dozens of ROIs one after the other, and each
// summary's arrays were garbage that grew the heap until the collector ran.
var digits = sync.Pool{New: func() any {
	s := make([]float64, 1<<digitBits)
	return &s
}}

// digitCounts returns a zeroed array of counts for one digit.
func digitCounts() []float64 { return *digits.Get().(*[]float64) }

// Release hands s's count arrays back for reuse. s must not be used after.
func (s *Radix) Release() {
	put := func(l []float64) {
		if l != nil {
			clear(l)
			digits.Put(&l)
		}
	}
	put(s.hist)
	for _, l := range s.low {
		put(l)
	}
	*s = Radix{}
}

// Add takes key k with weight w in the first pass.
func (s *Radix) Add(k uint32, w float64) { s.hist[k>>digitBits] += w }

// Merge adds o's first pass to s's.
func (s *Radix) Merge(o *Radix) {
	for b, v := range o.hist {
		s.hist[b] += v
	}
}

// Want registers the threshold t (a cumulative weight) after the first
// pass and returns its handle for Key, or −1 when the keys' total weight
// does not reach t.
func (s *Radix) Want(t float64) int {
	cum := 0.0
	for b, v := range s.hist {
		if v == 0 {
			continue
		}
		if cum+v >= t {
			if s.low == nil {
				s.low = map[int][]float64{}
			}
			if s.low[b] == nil {
				s.low[b] = digitCounts()
			}
			s.target = append(s.target, t)
			s.bucket = append(s.bucket, b)
			s.before = append(s.before, cum)
			return len(s.target) - 1
		}
		cum += v
	}
	return -1
}

// AddLow takes key k with weight w in the second pass.
func (s *Radix) AddLow(k uint32, w float64) {
	if l := s.low[int(k>>digitBits)]; l != nil {
		l[k&(1<<digitBits-1)] += w
	}
}

// Shard returns a Radix for part of the second pass, with the buckets s
// asked about and nothing added; MergeLow adds it back.
func (s *Radix) Shard() *Radix {
	o := &Radix{low: map[int][]float64{}}
	for b := range s.low {
		o.low[b] = digitCounts()
	}
	return o
}

// MergeLow adds o's second pass (a Shard of s) to s's.
func (s *Radix) MergeLow(o *Radix) {
	for b, l := range o.low {
		dst := s.low[b]
		for i, v := range l {
			dst[i] += v
		}
	}
}

// Key returns, after the second pass, the smallest key whose cumulative
// weight reaches threshold i: within its bucket, the first second digit
// that reaches it, or the bucket's last key when the sums by digit,
// rounded differently from the bucket's, fall short.
func (s *Radix) Key(i int) uint32 {
	b, cum, last := s.bucket[i], s.before[i], -1
	for l, v := range s.low[b] {
		if v == 0 {
			continue
		}
		last = l
		if cum += v; cum >= s.target[i] {
			break
		}
	}
	return uint32(b)<<digitBits | uint32(last)
}

// AscendingKey maps a float32 that is not NaN to a uint32 whose ascending
// order is the floats' ascending order (−0 before +0); FloatOfKey inverts
// it.
func AscendingKey(v float32) uint32 {
	b := math.Float32bits(v)
	if b&(1<<31) != 0 {
		return ^b // negative: larger magnitude, smaller key
	}
	return b | 1<<31
}

// FloatOfKey inverts AscendingKey.
func FloatOfKey(k uint32) float32 {
	if k&(1<<31) != 0 {
		return math.Float32frombits(k &^ (1 << 31))
	}
	return math.Float32frombits(^k)
}
