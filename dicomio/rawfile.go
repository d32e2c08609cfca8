package dicomio

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/suyashkumar/dicom"
	"github.com/suyashkumar/dicom/pkg/tag"
)

// Transfer syntax UIDs (DICOM PS3.5 section 10 and annex A; PS3.6 annex A).
const (
	tsImplicitLE = "1.2.840.10008.1.2"
	tsExplicitLE = "1.2.840.10008.1.2.1"
	tsDeflatedLE = "1.2.840.10008.1.2.1.99"
	tsExplicitBE = "1.2.840.10008.1.2.2"
	tsRLE        = "1.2.840.10008.1.2.5"
)

// transferSyntaxNames names the transfer syntaxes this package refuses, for
// the error message.
var transferSyntaxNames = map[string]string{
	tsDeflatedLE:              "deflated explicit VR little endian",
	tsExplicitBE:              "explicit VR big endian",
	tsRLE:                     "RLE lossless",
	"1.2.840.10008.1.2.4.50":  "JPEG baseline",
	"1.2.840.10008.1.2.4.51":  "JPEG extended",
	"1.2.840.10008.1.2.4.57":  "JPEG lossless",
	"1.2.840.10008.1.2.4.70":  "JPEG lossless, first-order prediction",
	"1.2.840.10008.1.2.4.80":  "JPEG-LS lossless",
	"1.2.840.10008.1.2.4.81":  "JPEG-LS near-lossless",
	"1.2.840.10008.1.2.4.90":  "JPEG 2000 lossless",
	"1.2.840.10008.1.2.4.91":  "JPEG 2000",
	"1.2.840.10008.1.2.4.92":  "JPEG 2000 multi-component lossless",
	"1.2.840.10008.1.2.4.93":  "JPEG 2000 multi-component",
	"1.2.840.10008.1.2.4.94":  "JPIP referenced",
	"1.2.840.10008.1.2.4.95":  "JPIP referenced deflate",
	"1.2.840.10008.1.2.4.201": "high-throughput JPEG 2000 lossless",
	"1.2.840.10008.1.2.4.202": "high-throughput JPEG 2000 lossless RPCL",
	"1.2.840.10008.1.2.4.203": "high-throughput JPEG 2000",
}

// checkTransferSyntax refuses every transfer syntax except the two
// uncompressed little-endian ones and says whether the supported one is
// implicit VR.
func checkTransferSyntax(uid string) (implicit bool, err error) {
	switch uid {
	case tsImplicitLE:
		return true, nil
	case tsExplicitLE:
		return false, nil
	}
	name, ok := transferSyntaxNames[uid]
	switch {
	case ok:
	case strings.HasPrefix(uid, "1.2.840.10008.1.2.4."):
		name = "compressed (JPEG family or video)"
	default:
		name = "unknown"
	}
	return false, unsupportedf("transfer syntax %s (%s) is not supported (%s); voxgamma reads uncompressed little-endian files (transfer syntax %s or %s): convert the file first",
		uid, name, tagString(tagTransferSyntaxUID), tsImplicitLE, tsExplicitLE)
}

// maxDepth bounds the nesting of sequences, so a hostile file cannot make the
// walker recurse without end.
const maxDepth = 32

// undefinedLength is the value length FFFFFFFFH (PS3.5 section 7.1).
const undefinedLength = 0xFFFFFFFF

// file is an opened DICOM file: its encoding as found by a walk over every
// element header, the data set before the top-level PixelData decoded by
// the library, and where the pixel data lie.
type file struct {
	path string
	f    *os.File
	size int64

	hasMeta        bool
	transferSyntax string
	implicit       bool
	dataStart      int64 // offset of the first data set element

	pixelFound        bool
	pixelEncapsulated bool
	pixelHeader       int64 // offset of the PixelData element header
	pixelOff          int64 // offset of the PixelData value
	pixelLen          int64 // its length in bytes
	parseEnd          int64 // the library parses [dataStart, parseEnd)

	ds    dataset
	notes []string
}

// guard runs fn and turns a panic into an error: a malformed file must
// never crash the program.
func guard(fn func() error) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = invalidf("malformed file: decoding failed (%v)", r)
		}
	}()
	return fn()
}

// openFile opens path, finds its encoding, checks every element length
// against the file size and decodes the data set (without pixel data). The
// caller closes the file. Errors do not name the path: callers add it.
func openFile(path string) (*file, error) {
	fh, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	st, err := fh.Stat()
	if err != nil {
		fh.Close()
		return nil, err
	}
	if !st.Mode().IsRegular() {
		fh.Close()
		return nil, notDICOMf("not a regular file (a directory or a device)")
	}
	f := &file{path: path, f: fh, size: st.Size()}
	if err := guard(f.open); err != nil {
		fh.Close()
		return nil, err
	}
	return f, nil
}

func (f *file) close() { f.f.Close() }

func (f *file) open() error {
	if err := f.sniff(); err != nil {
		return err
	}
	w := &walker{r: f.f, size: f.size, implicit: f.implicit}
	top := &topInfo{}
	end, err := w.walkElements(f.dataStart, f.size, 0, top)
	switch {
	case err != nil && top.pixelFound && top.pixelEnd > 0:
		// Whatever follows the pixel data (padding, junk) is not needed.
		f.notes = append(f.notes, fmt.Sprintf("ignored unreadable bytes after PixelData: %v", err))
		end = top.pixelEnd
	case err != nil:
		return err
	}
	f.pixelFound = top.pixelFound
	f.pixelEncapsulated = top.pixelEncapsulated
	f.pixelHeader, f.pixelOff, f.pixelLen = top.pixelHeader, top.pixelOff, top.pixelLen
	f.parseEnd = end
	if f.pixelFound {
		f.parseEnd = f.pixelHeader
	}
	return f.parse()
}

// sniff finds the file meta header (PS3.10 section 7.1) or, when there is
// none, infers the encoding of a raw data set.
func (f *file) sniff() error {
	head := make([]byte, 132)
	n, _ := f.f.ReadAt(head, 0)
	head = head[:n]
	switch {
	case n == 132 && string(head[128:132]) == "DICM":
		f.hasMeta = true
		return f.readMeta(132)
	case n >= 12 && string(head[0:4]) == "DICM" && binary.LittleEndian.Uint16(head[4:]) == 0x0002:
		// "DICM" and the file meta header without the 128-byte preamble.
		f.hasMeta = true
		f.notes = append(f.notes, "file has no 128-byte preamble before \"DICM\"")
		return f.readMeta(4)
	case n >= 8 && binary.LittleEndian.Uint16(head) == 0x0002:
		// A file meta group without the 128-byte preamble.
		f.hasMeta = true
		f.notes = append(f.notes, "file has no 128-byte preamble before its file meta header")
		return f.readMeta(0)
	}
	f.notes = append(f.notes, "file has no file meta header (no \"DICM\" at offset 128): read as a raw data set")
	return f.infer(0)
}

// readMeta reads the file meta elements (always explicit VR little endian)
// from off and sets the transfer syntax and the start of the data set.
func (f *file) readMeta(off int64) error {
	w := &walker{r: f.f, size: f.size, implicit: false}
	ts := ""
	for off < f.size {
		var g [2]byte
		if _, err := f.f.ReadAt(g[:], off); err != nil {
			return invalidf("file meta header truncated at offset %d", off)
		}
		if binary.LittleEndian.Uint16(g[:]) != 0x0002 {
			break
		}
		h, err := w.header(off, f.size)
		if err != nil {
			return err
		}
		if h.vl == undefinedLength {
			return invalid(h.t, "undefined length in the file meta header")
		}
		vs := off + h.hdrLen
		if int64(h.vl) > f.size-vs {
			return invalid(h.t, "claims %d bytes at offset %d but the file has only %d left (truncated?)", h.vl, vs, f.size-vs)
		}
		if h.t == tagTransferSyntaxUID {
			if h.vl > 256 {
				return invalid(h.t, "value of %d bytes is too long for a UID", h.vl)
			}
			b := make([]byte, h.vl)
			if _, err := f.f.ReadAt(b, vs); err != nil {
				return invalid(h.t, "cannot read value: %v", err)
			}
			ts = strings.Trim(string(b), " \x00")
		}
		off = vs + int64(h.vl)
	}
	f.dataStart = off
	if ts == "" {
		// The file has "DICM": never report it as lacking one.
		if off >= f.size {
			return invalid(tagTransferSyntaxUID, "the file ends inside its file meta header, before the transfer syntax: truncated")
		}
		f.notes = append(f.notes, tagString(tagTransferSyntaxUID)+" missing from the file meta header: encoding inferred from the data set")
		if err := f.infer(off); err != nil {
			if errors.Is(err, ErrNotDICOM) {
				return invalid(tagTransferSyntaxUID, "missing from the file meta header, and the data set after it is not readable as implicit or explicit VR little endian (truncated or damaged)")
			}
			return err
		}
	}
	implicit, err := checkTransferSyntax(ts)
	if err != nil {
		return err
	}
	f.transferSyntax, f.implicit = ts, implicit
	return nil
}

// infer decides between implicit and explicit VR little endian for a data
// set starting at off that has no transfer syntax to say which. It accepts an
// encoding only when every element header of the whole file parses under it,
// with tags in ascending order, and exactly one encoding does so.
func (f *file) infer(off int64) error {
	f.dataStart = off
	var ok []bool
	var errs []error
	for _, implicit := range []bool{true, false} {
		w := &walker{r: f.f, size: f.size, implicit: implicit}
		top := &topInfo{}
		_, err := w.walkElements(off, f.size, 0, top)
		if err == nil && top.count == 0 {
			err = errors.New("no data element")
		}
		if err == nil && top.first.Group < 0x0008 && top.first.Group != 0x0002 {
			err = fmt.Errorf("first tag %s is not a data set tag", tagString(top.first))
		}
		ok = append(ok, err == nil)
		errs = append(errs, err)
	}
	switch {
	case ok[0] && !ok[1]:
		f.transferSyntax, f.implicit = tsImplicitLE, true
		f.notes = append(f.notes, "encoding inferred: implicit VR little endian")
		return nil
	case ok[1] && !ok[0]:
		f.transferSyntax, f.implicit = tsExplicitLE, false
		f.notes = append(f.notes, "encoding inferred: explicit VR little endian")
		return nil
	case ok[0] && ok[1]:
		return notDICOMf("data set without file meta header is ambiguous: it parses both as implicit and as explicit VR little endian")
	}
	// Big endian raw data sets: the first group reads sensibly only in big endian.
	var b [6]byte
	if n, _ := f.f.ReadAt(b[:], off); n == 6 {
		gLE, gBE := binary.LittleEndian.Uint16(b[:]), binary.BigEndian.Uint16(b[:])
		if gBE >= 0x0002 && gBE <= 0x0010 && gBE%2 == 0 && gLE > 0x00FF && isVR(b[4], b[5]) {
			return unsupportedf("transfer syntax %s (explicit VR big endian) is not supported: the data set without file meta header is big endian; convert the file first", tsExplicitBE)
		}
	}
	return notDICOMf("no \"DICM\" at offset 128 and the content is not a little-endian DICOM data set (implicit VR: %v; explicit VR: %v)", errs[0], errs[1])
}

// parse hands the data set before the pixel data to the DICOM library,
// behind a file meta header of our own that states the transfer syntax
// found, so the library never has to guess it.
func (f *file) parse() error {
	meta := syntheticMeta(f.transferSyntax)
	body := io.NewSectionReader(f.f, f.dataStart, f.parseEnd-f.dataStart)
	n := int64(len(meta)) + f.parseEnd - f.dataStart
	ds, err := dicom.Parse(io.MultiReader(bytes.NewReader(meta), body), n, nil,
		dicom.AllowUnknownSpecificCharacterSet(), dicom.SkipPixelData())
	if err != nil {
		return invalidf("decoding the data set: %v", err)
	}
	var elems []*dicom.Element
	for _, e := range ds.Elements {
		if e.Tag.Group != 0x0002 {
			elems = append(elems, e)
		}
	}
	f.ds = dataset{elems: elems}
	return nil
}

// syntheticMeta returns a minimal file meta header (preamble, "DICM",
// group length, transfer syntax) for the library.
func syntheticMeta(ts string) []byte {
	v := []byte(ts)
	if len(v)%2 == 1 {
		v = append(v, 0)
	}
	var b bytes.Buffer
	b.Write(make([]byte, 128))
	b.WriteString("DICM")
	el := func(g, e uint16, vr string, val []byte) {
		binary.Write(&b, binary.LittleEndian, g)
		binary.Write(&b, binary.LittleEndian, e)
		b.WriteString(vr)
		binary.Write(&b, binary.LittleEndian, uint16(len(val)))
		b.Write(val)
	}
	groupLen := make([]byte, 4)
	binary.LittleEndian.PutUint32(groupLen, uint32(8+len(v)))
	el(0x0002, 0x0000, "UL", groupLen)
	el(0x0002, 0x0010, "UI", v)
	return b.Bytes()
}

// walker reads element headers (PS3.5 section 7) from a file and checks that
// every value length fits in what contains it, so that nothing later trusts a
// length the file cannot hold.
type walker struct {
	r        io.ReaderAt
	size     int64
	implicit bool
}

type elemHeader struct {
	t      tag.Tag
	vr     string
	vl     uint32
	hdrLen int64
}

// topInfo collects what the walk over the top-level data set found.
type topInfo struct {
	count             int
	first, last       tag.Tag
	pixelFound        bool
	pixelEncapsulated bool
	pixelHeader       int64
	pixelOff          int64
	pixelLen          int64
	pixelEnd          int64
}

// longVRs have a reserved 2 bytes and a 4-byte length in explicit VR.
var longVRs = map[string]bool{"OB": true, "OD": true, "OF": true, "OL": true, "OV": true, "OW": true,
	"SQ": true, "UC": true, "UN": true, "UR": true, "UT": true, "SV": true, "UV": true}

// shortVRs have a 2-byte length in explicit VR.
var shortVRs = map[string]bool{"AE": true, "AS": true, "AT": true, "CS": true, "DA": true, "DS": true,
	"DT": true, "FD": true, "FL": true, "IS": true, "LO": true, "LT": true, "PN": true, "SH": true,
	"SL": true, "SS": true, "ST": true, "TM": true, "UI": true, "UL": true, "US": true}

func isVR(a, b byte) bool {
	s := string([]byte{a, b})
	return longVRs[s] || shortVRs[s]
}

// header reads the element header at off; end bounds the enclosing value.
func (w *walker) header(off, end int64) (elemHeader, error) {
	var b [12]byte
	if end-off < 8 {
		return elemHeader{}, invalidf("element header at offset %d cut short by the end of its container at %d (truncated?)", off, end)
	}
	if _, err := w.r.ReadAt(b[:8], off); err != nil {
		return elemHeader{}, invalidf("cannot read element header at offset %d: %v", off, err)
	}
	h := elemHeader{t: tag.Tag{Group: binary.LittleEndian.Uint16(b[0:]), Element: binary.LittleEndian.Uint16(b[2:])}}
	if h.t.Group == 0xFFFE || w.implicit {
		h.vl = binary.LittleEndian.Uint32(b[4:])
		h.hdrLen = 8
		return h, nil
	}
	if !isVR(b[4], b[5]) {
		return elemHeader{}, invalid(h.t, "invalid value representation %q at offset %d", b[4:6], off+4)
	}
	h.vr = string(b[4:6])
	if longVRs[h.vr] {
		if end-off < 12 {
			return elemHeader{}, invalidf("element header at offset %d cut short (truncated?)", off)
		}
		if _, err := w.r.ReadAt(b[8:12], off+8); err != nil {
			return elemHeader{}, invalidf("cannot read element header at offset %d: %v", off, err)
		}
		h.vl = binary.LittleEndian.Uint32(b[8:])
		h.hdrLen = 12
		return h, nil
	}
	h.vl = uint32(binary.LittleEndian.Uint16(b[6:]))
	h.hdrLen = 8
	return h, nil
}

// isSequence says whether an element holds items: explicit VR SQ, or in
// implicit VR a tag the dictionary knows as SQ (as the library decides).
func (w *walker) isSequence(h elemHeader) bool {
	if !w.implicit {
		return h.vr == "SQ"
	}
	info, err := tag.Find(h.t)
	return err == nil && len(info.VRs) > 0 && info.VRs[0] == "SQ"
}

// walkElements walks data elements from off. With end >= 0 they fill
// [off, end); with end < 0 they form an item of undefined length, closed by
// an Item Delimitation Item. top, for the top-level data set only, records
// the pixel data and checks tag order. It returns the offset after the last
// byte consumed.
func (w *walker) walkElements(off, end int64, depth int, top *topInfo) (int64, error) {
	if depth > maxDepth {
		return 0, invalidf("sequences nested more than %d deep at offset %d", maxDepth, off)
	}
	limit := end
	if end < 0 {
		limit = w.size
	}
	for end < 0 || off < end {
		h, err := w.header(off, limit)
		if err != nil {
			return 0, err
		}
		if end < 0 && h.t == tagItemDelimitation {
			if h.vl != 0 {
				return 0, delimiterLength(h.t, off, h.vl)
			}
			return off + 8, nil
		}
		if h.t.Group == 0xFFFE {
			return 0, invalid(h.t, "unexpected at offset %d", off)
		}
		if top != nil {
			if top.count > 0 && h.t.Compare(top.last) <= 0 {
				return 0, invalidf("data set tags out of order at offset %d: %s after %s", off, tagString(h.t), tagString(top.last))
			}
			if top.count == 0 {
				top.first = h.t
			}
			top.count++
			top.last = h.t
		}
		vs := off + h.hdrLen
		isPixel := top != nil && h.t == tagPixelData
		if h.vl == undefinedLength {
			switch {
			case isPixel:
				top.pixelFound, top.pixelEncapsulated, top.pixelHeader, top.pixelOff = true, true, off, vs
				next, err := w.walkItems(vs, -1, depth+1, false)
				if err != nil {
					return 0, err
				}
				top.pixelEnd = next
				off = next
			case w.implicit || h.vr == "SQ" || h.vr == "UN":
				next, err := w.walkItems(vs, -1, depth+1, true)
				if err != nil {
					return 0, fmt.Errorf("in %s: %w", tagString(h.t), err)
				}
				off = next
			case h.vr == "OB" || h.vr == "OW":
				next, err := w.walkItems(vs, -1, depth+1, false)
				if err != nil {
					return 0, fmt.Errorf("in %s: %w", tagString(h.t), err)
				}
				off = next
			default:
				return 0, invalid(h.t, "undefined length is not allowed for VR %s", h.vr)
			}
			continue
		}
		if int64(h.vl) > limit-vs {
			return 0, invalid(h.t, "claims %d bytes at offset %d but only %d remain in its container (file truncated or corrupt)", h.vl, vs, limit-vs)
		}
		if isPixel {
			top.pixelFound, top.pixelHeader, top.pixelOff, top.pixelLen = true, off, vs, int64(h.vl)
			top.pixelEnd = vs + int64(h.vl)
		} else if w.isSequence(h) {
			if _, err := w.walkItems(vs, vs+int64(h.vl), depth+1, true); err != nil {
				return 0, fmt.Errorf("in %s: %w", tagString(h.t), err)
			}
		}
		off = vs + int64(h.vl)
	}
	return off, nil
}

// delimiterLength is the error for an Item or Sequence Delimitation Item
// whose value length is not 0, as DICOM PS3.5 section 7.5 requires. Read
// past such a delimiter, the DICOM library and this walk would disagree
// about where the following elements start, and the library could then
// take a misread length of up to 4 GiB as an element's and allocate it
// before finding the file too short (found by FuzzReadPlan).
func delimiterLength(t tag.Tag, off int64, vl uint32) error {
	return invalid(t, "delimitation item at offset %d has value length %d: DICOM PS3.5 section 7.5 requires 0", off, vl)
}

// walkItems walks the items of a sequence (seq) or the fragments of
// encapsulated pixel data (!seq) from off; end < 0 means the sequence has
// undefined length and ends with a Sequence Delimitation Item.
func (w *walker) walkItems(off, end int64, depth int, seq bool) (int64, error) {
	if depth > maxDepth {
		return 0, invalidf("sequences nested more than %d deep at offset %d", maxDepth, off)
	}
	limit := end
	if end < 0 {
		limit = w.size
	}
	for {
		if end >= 0 && off >= end {
			return off, nil
		}
		if limit-off < 8 {
			return 0, invalidf("sequence at offset %d not terminated before the end of the file (truncated?)", off)
		}
		var b [8]byte
		if _, err := w.r.ReadAt(b[:], off); err != nil {
			return 0, invalidf("cannot read item header at offset %d: %v", off, err)
		}
		t := tag.Tag{Group: binary.LittleEndian.Uint16(b[0:]), Element: binary.LittleEndian.Uint16(b[2:])}
		vl := binary.LittleEndian.Uint32(b[4:])
		if t == tagSequenceDelimitation {
			// Pixel data fragments are never decoded by the library;
			// a sequence of items is, and must end where the walk ends.
			if seq && vl != 0 {
				return 0, delimiterLength(t, off, vl)
			}
			return off + 8, nil
		}
		if t != tagItem {
			return 0, invalidf("expected an Item (FFFE,E000) at offset %d, found %s", off, tagString(t))
		}
		vs := off + 8
		if vl == undefinedLength {
			if !seq {
				return 0, invalidf("pixel data fragment of undefined length at offset %d", off)
			}
			next, err := w.walkElements(vs, -1, depth, nil)
			if err != nil {
				return 0, err
			}
			off = next
			continue
		}
		if int64(vl) > limit-vs {
			return 0, invalidf("item at offset %d claims %d bytes but only %d remain (file truncated or corrupt)", off, vl, limit-vs)
		}
		if seq {
			if _, err := w.walkElements(vs, vs+int64(vl), depth, nil); err != nil {
				return 0, err
			}
		}
		off = vs + int64(vl)
	}
}
