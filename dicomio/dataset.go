package dicomio

import (
	"math"
	"strconv"
	"strings"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"
)

// dataset gives typed access to the elements the library decoded, with
// errors that name the tag.
type dataset struct {
	elems []*dicom.Element
}

func (d dataset) find(t tag.Tag) *dicom.Element {
	for _, e := range d.elems {
		if e.Tag == t {
			return e
		}
	}
	return nil
}

// strs returns the values of a string element, each trimmed of padding.
// An absent element, or one with an empty value, gives nil.
func (d dataset) strs(t tag.Tag) []string {
	e := d.find(t)
	if e == nil || e.Value == nil {
		return nil
	}
	var raw []string
	switch v := e.Value.GetValue().(type) {
	case []string:
		raw = v
	case []byte:
		// A known tag stored with VR UN: its value is the text.
		raw = strings.Split(string(v), `\`)
	default:
		return nil
	}
	out := make([]string, 0, len(raw))
	for _, s := range raw {
		out = append(out, strings.Trim(s, " \x00"))
	}
	if len(out) == 1 && out[0] == "" {
		return nil
	}
	return out
}

// str returns the first value of a string element, "" when absent.
func (d dataset) str(t tag.Tag) string {
	if s := d.strs(t); len(s) > 0 {
		return s[0]
	}
	return ""
}

// decimals parses a DS (or IS) element. present is false when the element
// is absent or empty; a value that is not a number is an error.
func (d dataset) decimals(t tag.Tag) (v []float64, present bool, err error) {
	s := d.strs(t)
	if len(s) == 0 {
		return nil, false, nil
	}
	v = make([]float64, len(s))
	for i, x := range s {
		f, err := strconv.ParseFloat(strings.TrimSpace(x), 64)
		if err != nil {
			return nil, true, invalid(t, "value %d (%q) is not a decimal number", i+1, x)
		}
		v[i] = f
	}
	return v, true, nil
}

// numbers reads a numeric element whatever its VR: binary floating point
// (FD, FL) or a decimal string (DS, IS).
func (d dataset) numbers(t tag.Tag) ([]float64, bool, error) {
	if e := d.find(t); e != nil && e.Value != nil {
		switch v := e.Value.GetValue().(type) {
		case []float64:
			return v, len(v) > 0, nil
		}
	}
	return d.decimals(t)
}

// finiteDecimals is decimals with n values (n < 0: any number) that must all
// be finite.
func (d dataset) finiteDecimals(t tag.Tag, n int) ([]float64, bool, error) {
	v, ok, err := d.decimals(t)
	if err != nil || !ok {
		return v, ok, err
	}
	if n >= 0 && len(v) != n {
		return nil, true, invalid(t, "has %d values, want %d", len(v), n)
	}
	for i, x := range v {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			return nil, true, invalid(t, "value %d is %g, want a finite number", i+1, x)
		}
	}
	return v, true, nil
}

// integer reads the first value of an IS, US, SS, UL or SL element.
func (d dataset) integer(t tag.Tag) (int, bool, error) {
	e := d.find(t)
	if e == nil || e.Value == nil {
		return 0, false, nil
	}
	switch v := e.Value.GetValue().(type) {
	case []int:
		if len(v) == 0 {
			return 0, false, nil
		}
		return v[0], true, nil
	}
	s := d.strs(t)
	if len(s) == 0 {
		return 0, false, nil
	}
	n, err := strconv.Atoi(strings.TrimSpace(s[0]))
	if err != nil {
		return 0, true, invalid(t, "value %q is not an integer", s[0])
	}
	return n, true, nil
}

// integers reads every value of an IS, US or similar element.
func (d dataset) integers(t tag.Tag) ([]int, bool, error) {
	e := d.find(t)
	if e == nil || e.Value == nil {
		return nil, false, nil
	}
	if v, ok := e.Value.GetValue().([]int); ok {
		return v, len(v) > 0, nil
	}
	s := d.strs(t)
	if len(s) == 0 {
		return nil, false, nil
	}
	out := make([]int, len(s))
	for i, x := range s {
		n, err := strconv.Atoi(strings.TrimSpace(x))
		if err != nil {
			return nil, true, invalid(t, "value %d (%q) is not an integer", i+1, x)
		}
		out[i] = n
	}
	return out, true, nil
}

// items returns the items of a sequence element (nil when absent).
func (d dataset) items(t tag.Tag) []dataset {
	e := d.find(t)
	if e == nil || e.Value == nil {
		return nil
	}
	seq, ok := e.Value.GetValue().([]*dicom.SequenceItemValue)
	if !ok {
		return nil
	}
	out := make([]dataset, 0, len(seq))
	for _, it := range seq {
		elems, _ := it.GetValue().([]*dicom.Element)
		out = append(out, dataset{elems: elems})
	}
	return out
}
