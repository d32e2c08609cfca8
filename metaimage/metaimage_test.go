package metaimage_test

import (
	"bytes"
	"encoding/binary"
	"errors"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"testing"

	"voxgamma/metaimage"
	"voxgamma/volume"
)

func grid(t *testing.T, dir [3][3]float64, offK []float64) *volume.Grid {
	t.Helper()
	g, err := volume.New([3]int{4, 3, len(offK)}, [3]float64{-12.5, 30.25, -101}, dir,
		[3][]float64{{0, 2.5, 5, 7.5}, {0, 3, 6}, offK})
	if err != nil {
		t.Fatal(err)
	}
	for n := range g.Data {
		g.Data[n] = float32(n)*0.37 - 2
	}
	g.Data[5] = float32(math.NaN())
	return g
}

// Round trip for head-first, feet-first, prone and a permuted orientation:
// geometry and every value (NaN included) come back exactly.
func TestRoundTrip(t *testing.T) {
	dirs := map[string][3][3]float64{
		"HFS":      volume.Identity,
		"HFP":      {{-1, 0, 0}, {0, -1, 0}, {0, 0, 1}},
		"FFS":      {{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}},
		"sagittal": {{0, 1, 0}, {0, 0, -1}, {-1, 0, 0}},
	}
	for name, d := range dirs {
		for _, off := range [][]float64{{0, 2, 4, 6, 8}, {0, -2, -4}, {0}} {
			g := grid(t, d, off)
			path := filepath.Join(t.TempDir(), "g.mha")
			if err := metaimage.Write(path, g); err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			h, err := metaimage.Read(path)
			if err != nil {
				t.Fatalf("%s: %v", name, err)
			}
			if !h.SameGeometry(g) || h.Origin() != g.Origin() || h.Direction() != g.Direction() {
				t.Errorf("%s %v: geometry %v %v, want %v %v", name, off, h.Origin(), h.Direction(), g.Origin(), g.Direction())
			}
			for n, v := range g.Data {
				if math.Float32bits(h.Data[n]) != math.Float32bits(v) {
					t.Errorf("%s: sample %d: %v, want %v", name, n, h.Data[n], v)
				}
			}
		}
	}
}

// The file follows the MetaIO single-file layout: "Key = Value" header
// lines ending with ElementDataFile = LOCAL, then little-endian float32
// samples, i fastest. Checked here by hand, independently of Read.
func TestFileLayout(t *testing.T) {
	g := grid(t, [3][3]float64{{-1, 0, 0}, {0, 1, 0}, {0, 0, -1}}, []float64{0, 2, 4})
	path := filepath.Join(t.TempDir(), "g.mha")
	if err := metaimage.Write(path, g); err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	end := bytes.Index(data, []byte("ElementDataFile = LOCAL\n"))
	if end < 0 {
		t.Fatal("no ElementDataFile = LOCAL line")
	}
	header := string(data[:end])
	for _, want := range []string{
		"ObjectType = Image\n", "NDims = 3\n", "BinaryData = True\n", "BinaryDataByteOrderMSB = False\n",
		"TransformMatrix = -1 0 0 0 1 0 0 0 -1\n", "Offset = -12.5 30.25 -101\n", "ElementSpacing = 2.5 3 2\n",
		"DimSize = 4 3 3\n", "ElementType = MET_FLOAT\n",
	} {
		if !strings.Contains(header, want) {
			t.Errorf("header lacks %q:\n%s", want, header)
		}
	}
	body := data[end+len("ElementDataFile = LOCAL\n"):]
	if len(body) != 4*len(g.Data) {
		t.Fatalf("%d data bytes, want %d", len(body), 4*len(g.Data))
	}
	for n, v := range g.Data {
		if got := binary.LittleEndian.Uint32(body[4*n:]); got != math.Float32bits(v) {
			t.Errorf("sample %d: bits %#x, want %#x", n, got, math.Float32bits(v))
		}
	}
}

func TestWriteNonUniform(t *testing.T) {
	g := grid(t, volume.Identity, []float64{0, 1, 3})
	path := filepath.Join(t.TempDir(), "g.mha")
	err := metaimage.Write(path, g)
	if err == nil || !errors.Is(err, metaimage.ErrNonUniform) || !strings.Contains(err.Error(), path) || !strings.Contains(err.Error(), "index axis k") {
		t.Fatalf("error %v", err)
	}
	if _, err := os.Stat(path); err == nil {
		t.Error("a file was left behind")
	}
}

func TestReadBadInput(t *testing.T) {
	g := grid(t, volume.Identity, []float64{0, 2})
	dir := t.TempDir()
	good := filepath.Join(dir, "good.mha")
	if err := metaimage.Write(good, g); err != nil {
		t.Fatal(err)
	}
	data, _ := os.ReadFile(good)
	cases := map[string]struct {
		data []byte
		want string
	}{
		"truncated":   {data[:len(data)-8], "needs 96 bytes of data but the file holds 88"},
		"short type":  {bytes.Replace(data, []byte("MET_FLOAT"), []byte("MET_SHORT"), 1), `ElementType is "MET_SHORT"`},
		"big endian":  {bytes.Replace(data, []byte("BinaryDataByteOrderMSB = False"), []byte("BinaryDataByteOrderMSB = True"), 1), "big-endian"},
		"huge claim":  {bytes.Replace(data, []byte("DimSize = 4 3 2"), []byte("DimSize = 65535 65535 65535"), 1), "needs 1125848368021500 bytes"},
		"oblique":     {bytes.Replace(data, []byte("TransformMatrix = 1 0 0"), []byte("TransformMatrix = 0.8 0.6 0"), 1), "oblique"},
		"not a text":  {[]byte{0, 1, 2, 3}, "header ends before ElementDataFile"},
		"two-file":    {bytes.Replace(data, []byte("ElementDataFile = LOCAL"), []byte("ElementDataFile = g.raw"), 1), `ElementDataFile is "g.raw"`},
		"bad spacing": {bytes.Replace(data, []byte("ElementSpacing = 2.5 3 2"), []byte("ElementSpacing = 2.5 x 2"), 1), `ElementSpacing value "x"`},
	}
	for name, c := range cases {
		path := filepath.Join(dir, name+".mha")
		os.WriteFile(path, c.data, 0o644)
		var before, after runtime.MemStats
		runtime.ReadMemStats(&before)
		_, err := metaimage.Read(path)
		runtime.ReadMemStats(&after)
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.HasPrefix(err.Error(), "reading "+path) {
			t.Errorf("%s: error %v, want one naming the file and containing %q", name, err, c.want)
		}
		if d := after.TotalAlloc - before.TotalAlloc; d > 8<<20 {
			t.Errorf("%s: allocated %d bytes", name, d)
		}
	}
}
