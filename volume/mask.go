package volume

import "fmt"

// Mask marks a set of voxels of a grid. It is tied to a grid's dimensions
// only; callers keep the grid it belongs to beside it.
type Mask struct {
	dims [3]int
	// Bits holds one flag per voxel, in the same order as [Grid.Data].
	Bits []bool
}

// NewMask returns an empty mask with the dimensions of g.
func NewMask(g *Grid) *Mask {
	return &Mask{dims: g.dims, Bits: make([]bool, len(g.Data))}
}

// Dims returns the dimensions of the grid the mask belongs to.
func (m *Mask) Dims() [3]int { return m.dims }

// Count returns the number of voxels set.
func (m *Mask) Count() int {
	n := 0
	for _, b := range m.Bits {
		if b {
			n++
		}
	}
	return n
}

// Clone returns a copy of m.
func (m *Mask) Clone() *Mask {
	return &Mask{dims: m.dims, Bits: append([]bool(nil), m.Bits...)}
}

func (m *Mask) check(o *Mask) error {
	if m.dims != o.dims {
		return fmt.Errorf("volume: mask dimensions differ: %v and %v", m.dims, o.dims)
	}
	return nil
}

// Or sets in m every voxel set in o.
func (m *Mask) Or(o *Mask) error {
	if err := m.check(o); err != nil {
		return err
	}
	for n, b := range o.Bits {
		m.Bits[n] = m.Bits[n] || b
	}
	return nil
}

// And clears in m every voxel not set in o.
func (m *Mask) And(o *Mask) error {
	if err := m.check(o); err != nil {
		return err
	}
	for n, b := range o.Bits {
		m.Bits[n] = m.Bits[n] && b
	}
	return nil
}

// Not inverts m.
func (m *Mask) Not() {
	for n := range m.Bits {
		m.Bits[n] = !m.Bits[n]
	}
}

// Threshold returns the mask of the voxels of g whose value is at least
// level (NaN never is).
func Threshold(g *Grid, level float32) *Mask {
	m := NewMask(g)
	for n, v := range g.Data {
		m.Bits[n] = v >= level
	}
	return m
}
