package metaimage

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"voxgamma/internal/atomicfile"
	"voxgamma/volume"
)

// ErrNonUniform is returned (wrapped) by [Write] for a grid whose offsets
// along some axis are not uniform.
var ErrNonUniform = errors.New("non-uniform spacing cannot be expressed in MetaImage")

// Write writes g to path as a single-file MetaImage (see the package
// documentation), atomically.
func Write(path string, g *volume.Grid) error {
	dims := g.Dims()
	var spacing [3]float64
	for a := 0; a < 3; a++ {
		s, ok := g.Spacing(a)
		if !ok {
			return fmt.Errorf("writing %s: index axis %c: %w (offsets %v); resample the grid onto a uniform one first",
				path, "ijk"[a], ErrNonUniform, g.Offsets(a))
		}
		if s == 0 {
			s = 1 // single sample: any positive spacing describes it
		}
		spacing[a] = s
	}
	dir := g.Direction()
	origin := g.Origin()
	var hdr strings.Builder
	fmt.Fprintf(&hdr, "ObjectType = Image\n")
	fmt.Fprintf(&hdr, "NDims = 3\n")
	fmt.Fprintf(&hdr, "BinaryData = True\n")
	fmt.Fprintf(&hdr, "BinaryDataByteOrderMSB = False\n")
	fmt.Fprintf(&hdr, "CompressedData = False\n")
	fmt.Fprintf(&hdr, "TransformMatrix = %s\n", floats(dir[0][:], dir[1][:], dir[2][:]))
	fmt.Fprintf(&hdr, "Offset = %s\n", floats(origin[:]))
	fmt.Fprintf(&hdr, "CenterOfRotation = 0 0 0\n")
	fmt.Fprintf(&hdr, "ElementSpacing = %s\n", floats(spacing[:]))
	fmt.Fprintf(&hdr, "DimSize = %d %d %d\n", dims[0], dims[1], dims[2])
	fmt.Fprintf(&hdr, "ElementType = MET_FLOAT\n")
	fmt.Fprintf(&hdr, "ElementDataFile = LOCAL\n")
	return atomicfile.Write(path, func(w io.Writer) error {
		if _, err := io.WriteString(w, hdr.String()); err != nil {
			return err
		}
		var buf [4096]byte
		for n := 0; n < len(g.Data); {
			m := 0
			for ; m+4 <= len(buf) && n < len(g.Data); m, n = m+4, n+1 {
				binary.LittleEndian.PutUint32(buf[m:], math.Float32bits(g.Data[n]))
			}
			if _, err := w.Write(buf[:m]); err != nil {
				return err
			}
		}
		return nil
	})
}

// floats formats values with the shortest representation that reads back
// exactly.
func floats(groups ...[]float64) string {
	var parts []string
	for _, g := range groups {
		for _, v := range g {
			if v == 0 {
				v = 0 // no "-0"
			}
			parts = append(parts, strconv.FormatFloat(v, 'g', -1, 64))
		}
	}
	return strings.Join(parts, " ")
}

// maxHeader bounds the header size read.
const maxHeader = 1 << 16

// Read reads a MetaImage written by [Write] (or any single-file,
// uncompressed, little-endian MET_FLOAT 3D MetaImage whose TransformMatrix
// is axis-aligned) into a grid.
func Read(path string) (*volume.Grid, error) {
	g, err := read(path)
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	return g, nil
}

func read(path string) (*volume.Grid, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, err
	}
	br := bufio.NewReader(io.LimitReader(f, maxHeader))
	fields := map[string]string{}
	headerLen := int64(0)
	for {
		line, err := br.ReadString('\n')
		headerLen += int64(len(line))
		if err != nil {
			return nil, fmt.Errorf("header ends before ElementDataFile (not a MetaImage, or header over %d bytes)", maxHeader)
		}
		key, val, ok := strings.Cut(strings.TrimRight(line, "\r\n"), "=")
		if !ok {
			return nil, fmt.Errorf("header line %q is not \"Key = Value\"", strings.TrimSpace(line))
		}
		key, val = strings.TrimSpace(key), strings.TrimSpace(val)
		fields[key] = val
		if key == "ElementDataFile" {
			break
		}
	}
	want := map[string]string{"NDims": "3", "ElementType": "MET_FLOAT", "ElementDataFile": "LOCAL"}
	for k, v := range want {
		if fields[k] != v {
			return nil, fmt.Errorf("%s is %q, want %q (only single-file 3D MET_FLOAT images are read)", k, fields[k], v)
		}
	}
	if t := fields["ObjectType"]; t != "" && t != "Image" {
		return nil, fmt.Errorf("ObjectType is %q, want Image", t)
	}
	for _, k := range []string{"BinaryDataByteOrderMSB", "ElementByteOrderMSB"} {
		if strings.EqualFold(fields[k], "True") {
			return nil, fmt.Errorf("%s is True: big-endian data are not read", k)
		}
	}
	if strings.EqualFold(fields["CompressedData"], "True") {
		return nil, errors.New("CompressedData is True: compressed data are not read")
	}
	dimsF, err := numbers(fields, "DimSize", 3, nil)
	if err != nil {
		return nil, err
	}
	var dims [3]int
	voxels := 1.0
	for a, v := range dimsF {
		if v < 1 || v != math.Trunc(v) {
			return nil, fmt.Errorf("DimSize %v: want positive integers", dimsF)
		}
		dims[a] = int(v)
		voxels *= v
	}
	if voxels*4 > float64(st.Size()-headerLen) {
		return nil, fmt.Errorf("DimSize %d×%d×%d needs %.0f bytes of data but the file holds %d after its header", dims[0], dims[1], dims[2], voxels*4, st.Size()-headerLen)
	}
	spacing, err := numbers(fields, "ElementSpacing", 3, []float64{1, 1, 1})
	if err != nil {
		return nil, err
	}
	offset, err := firstNumbers(fields, []string{"Offset", "Position", "Origin"}, 3, []float64{0, 0, 0})
	if err != nil {
		return nil, err
	}
	tm, err := firstNumbers(fields, []string{"TransformMatrix", "Rotation", "Orientation"}, 9, []float64{1, 0, 0, 0, 1, 0, 0, 0, 1})
	if err != nil {
		return nil, err
	}
	var origin [3]float64
	var dir [3][3]float64
	var sp [3]float64
	copy(origin[:], offset)
	copy(sp[:], spacing)
	for a := 0; a < 3; a++ {
		copy(dir[a][:], tm[3*a:3*a+3])
	}
	g, err := volume.NewUniform(dims, origin, sp, dir)
	if err != nil {
		return nil, err
	}
	if _, err := f.Seek(headerLen, io.SeekStart); err != nil {
		return nil, err
	}
	r := bufio.NewReaderSize(f, 1<<16)
	var buf [4096]byte
	for n := 0; n < len(g.Data); {
		m := min(len(buf), 4*(len(g.Data)-n))
		if _, err := io.ReadFull(r, buf[:m]); err != nil {
			return nil, fmt.Errorf("reading the samples: %w", err)
		}
		for b := 0; b < m; b, n = b+4, n+1 {
			g.Data[n] = math.Float32frombits(binary.LittleEndian.Uint32(buf[b:]))
		}
	}
	return g, nil
}

// numbers parses the n numbers of a header field, or returns def when the
// field is absent (an error when def is nil).
func numbers(fields map[string]string, key string, n int, def []float64) ([]float64, error) {
	s, ok := fields[key]
	if !ok {
		if def == nil {
			return nil, fmt.Errorf("header has no %s", key)
		}
		return def, nil
	}
	parts := strings.Fields(s)
	if len(parts) != n {
		return nil, fmt.Errorf("%s has %d values, want %d", key, len(parts), n)
	}
	out := make([]float64, n)
	for i, p := range parts {
		v, err := strconv.ParseFloat(p, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%s value %q is not a finite number", key, p)
		}
		out[i] = v
	}
	return out, nil
}

// firstNumbers is numbers for the first of several synonymous keys present.
func firstNumbers(fields map[string]string, keys []string, n int, def []float64) ([]float64, error) {
	for _, k := range keys {
		if _, ok := fields[k]; ok {
			return numbers(fields, k, n, def)
		}
	}
	return def, nil
}
