package dicomsend_test

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/dicomsend"
	"voxgamma/internal/scptest"
	"voxgamma/volume"
)

func TestParseDestination(t *testing.T) {
	good := map[string]dicomsend.Destination{
		"QA_ARCHIVE@10.0.0.5:104":  {AETitle: "QA_ARCHIVE", Host: "10.0.0.5", Port: 104},
		"PACS@pacs.example:11112":  {AETitle: "PACS", Host: "pacs.example", Port: 11112},
		"A B@[::1]:4242":           {AETitle: "A B", Host: "::1", Port: 4242},
		"SIXTEEN_CHARS_AE@h:65535": {AETitle: "SIXTEEN_CHARS_AE", Host: "h", Port: 65535},
	}
	for s, want := range good {
		d, err := dicomsend.ParseDestination(s)
		if err != nil || d != want {
			t.Errorf("%q: %+v %v, want %+v", s, d, err, want)
		}
		if d.String() != s {
			t.Errorf("%q written back as %q", s, d.String())
		}
	}
	// PS3.5 6.2: AE is at most 16 characters, no backslash or control
	// characters; a port is 1-65535.
	for s, want := range map[string]string{
		"10.0.0.5:104":            "want AET@HOST:PORT",
		"@10.0.0.5:104":           "want AET@HOST:PORT",
		"SEVENTEEN_CHARS_A@h:104": "longer than the 16 characters",
		`BACK\SLASH@h:104`:        "without backslash",
		"AE@h":                    "want AET@HOST:PORT",
		"AE@h:0":                  "port \"0\"",
		"AE@h:65536":              "port \"65536\"",
		"AE@h:http":               "port \"http\"",
		"AE@-rf:104":              "want AET@HOST:PORT",
		"   @h:104":               "is empty",
		"AE@:104":                 "want AET@HOST:PORT",
		"TAB\tAE@h:104":           "printable ASCII",
	} {
		if _, err := dicomsend.ParseDestination(s); err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: error %v, want one saying %q", s, err, want)
		}
	}
}

// writeMap writes an invented gamma map as voxgamma does.
func writeMap(t *testing.T, path string) *dicomio.DoseInfo {
	t.Helper()
	g, err := volume.NewUniform([3]int{5, 4, 3}, [3]float64{-4, -3, -2}, [3]float64{2, 2, 2}, volume.Identity)
	if err != nil {
		t.Fatal(err)
	}
	for n := range g.Data {
		g.Data[n] = float32(n%7) / 5
	}
	info, err := dicomio.WriteDose(path, g, dicomio.PhantomIdentifiers("PHANTOM^NET", "VG-NET-001"), dicomio.GammaOptions("gamma index 3%/2mm global, unitless"))
	if err != nil {
		t.Fatal(err)
	}
	return info
}

// Files sent to a loopback storescp (dcmtk, the reference implementation
// of the Storage SCP here) arrive whole: storescp stores each under its
// SOPInstanceUID, and voxgamma's reader reads back the values written.
func TestSendToLoopbackStorescp(t *testing.T) {
	in := filepath.Join(t.TempDir(), "received")
	os.Mkdir(in, 0o755)
	node := scptest.Start(t, "QA_NODE", in)
	src := t.TempDir()
	var infos []*dicomio.DoseInfo
	var files []string
	for _, name := range []string{"gamma.dcm", "difference.dcm"} {
		p := filepath.Join(src, name)
		infos = append(infos, writeMap(t, p))
		files = append(files, p)
	}
	d := dicomsend.Destination{AETitle: node.AETitle, Host: "127.0.0.1", Port: node.Port, CallingAETitle: "VG_TEST"}
	if err := dicomsend.Send(context.Background(), d, files); err != nil {
		t.Fatalf("%v\nstorescp: %s", err, node.Log())
	}
	for i, info := range infos {
		// storescp names a received RT Dose "RD.<SOPInstanceUID>".
		got := filepath.Join(in, "RD."+info.SOPInstanceUID)
		g, gi, err := dicomio.ReadDose(got)
		if err != nil {
			t.Fatalf("received %s: %v\nstorescp: %s", files[i], err, node.Log())
		}
		want, _, err := dicomio.ReadDose(files[i])
		if err != nil {
			t.Fatal(err)
		}
		if gi.DoseType != "ERROR" || !g.SameGeometry(want) {
			t.Errorf("received %s: DoseType %s, geometry same %v", got, gi.DoseType, g.SameGeometry(want))
		}
		for n := range g.Data {
			if g.Data[n] != want.Data[n] {
				t.Fatalf("received %s: voxel %d is %v, sent %v", got, n, g.Data[n], want.Data[n])
			}
		}
	}
}

// A node that is not there, a node with another AE title: one error
// naming the destination and storescu's reason.
func TestSendFailures(t *testing.T) {
	in := t.TempDir()
	node := scptest.Start(t, "QA_NODE", in, "--refuse")
	p := filepath.Join(t.TempDir(), "gamma.dcm")
	writeMap(t, p)
	closed := scptest.FreePort(t)
	for name, d := range map[string]dicomsend.Destination{
		"nothing listening":   {AETitle: "QA_NODE", Host: "127.0.0.1", Port: closed},
		"association refused": {AETitle: "QA_NODE", Host: "127.0.0.1", Port: node.Port},
	} {
		err := dicomsend.Send(context.Background(), d, []string{p})
		if err == nil || !strings.Contains(err.Error(), "sending 1 files to "+d.String()+": storescu failed (exit 1)") {
			t.Errorf("%s: error %v", name, err)
		}
	}
	if entries, _ := os.ReadDir(in); len(entries) != 0 {
		t.Errorf("the refusing node stored %d files", len(entries))
	}
}
