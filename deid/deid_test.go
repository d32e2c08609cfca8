package deid

import (
	"crypto/sha256"
	"encoding/hex"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"voxgamma/dicomio"
	"voxgamma/internal/reftool"
)

// TestPseudonymIsHMAC: a pseudonym is "ANON-" and the first 8 bytes of
// HMAC-SHA-256(key, "voxgamma-deid/1\0" kind "\0" value) in upper-case hex,
// as Python's hmac module (an implementation of RFC 2104 independent of
// Go's) computes it; UIDs are "2.25." and the decimal of the first 16
// bytes of the HMAC over kind "uid" with the top bit cleared.
func TestPseudonymIsHMAC(t *testing.T) {
	py := reftool.Python(t, "apt-get install python3")
	k := NewKey([]byte("0123456789abcdef-site-secret"), "test")
	script := `import hmac, hashlib, sys
k = b"0123456789abcdef-site-secret"
m = lambda kind, v: hmac.new(k, b"voxgamma-deid/1\x00" + kind + b"\x00" + v, hashlib.sha256).digest()
print("ANON-" + m(b"id", b"12345678")[:8].hex().upper())
print("ANON-" + m(b"name", b"DOE^JANE")[:8].hex().upper())
d = bytearray(m(b"uid", b"1.2.826.0.1.3680043.2.1125.1")[:16]); d[0] &= 0x7f
print("2.25." + str(int.from_bytes(d, "big")))
`
	out, err := exec.Command(py, "-c", script).Output()
	if err != nil {
		t.Fatal(err)
	}
	want := strings.Fields(string(out))
	got := []string{k.Pseudonym(KindID, "12345678"), k.Pseudonym(KindName, "Doe^Jane^^ "), k.UID("1.2.826.0.1.3680043.2.1125.1")}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("value %d: %s, python hmac %s", i, got[i], want[i])
		}
	}
	if len(got[2]) > 64 {
		t.Errorf("UID %s longer than 64 characters (PS3.5 9.1)", got[2])
	}
}

// TestPseudonymNeedsTheKey: the old pseudonym, an unkeyed SHA-256 of a
// fixed prefix and the ID, let anyone recover an 8-digit ID by trying all
// 10^8 (the issue did it in 0.2 s). A keyed one differs from it and
// between keys, and stays the same for one key.
func TestPseudonymNeedsTheKey(t *testing.T) {
	id := "12345678"
	sum := sha256.Sum256([]byte("voxgamma-deidentify:" + id))
	unkeyed := "ANON-" + strings.ToUpper(hex.EncodeToString(sum[:6]))
	a, b := NewKey([]byte("site-A-secret-0123456789"), "a"), NewKey([]byte("site-B-secret-0123456789"), "b")
	if a.Pseudonym(KindID, id) == unkeyed || strings.HasPrefix(a.Pseudonym(KindID, id), unkeyed) {
		t.Error("the keyed pseudonym is the unkeyed hash")
	}
	if a.Pseudonym(KindID, id) == b.Pseudonym(KindID, id) || a.Pseudonym(KindID, id) != a.Pseudonym(KindID, " "+id+" ") {
		t.Error("pseudonyms must depend on the key and not on DICOM padding")
	}
	if a.ID() == b.ID() || RandomKey().ID() != "per-run" || RandomKey().Pseudonym(KindID, id) == RandomKey().Pseudonym(KindID, id) {
		t.Error("key ids or random keys")
	}
	if _, err := LoadKey("", func(string) string { return "short" }); err == nil || !strings.Contains(err.Error(), EnvSiteKey) {
		t.Errorf("a 5-byte key accepted: %v", err)
	}
	k, err := LoadKey("", func(string) string { return "site-A-secret-0123456789\n" })
	if err != nil || k.Pseudonym(KindID, id) != a.Pseudonym(KindID, id) || k.Random() {
		t.Errorf("key from the environment: %v", err)
	}
}

func TestScrub(t *testing.T) {
	k := NewKey([]byte("0123456789abcdef-site-secret"), "test")
	run := NewRun(k)
	s := run.Scope()
	dir := t.TempDir()
	ref := filepath.Join(dir, "DOE_JANE_12345678", "RD.plan.dcm")
	s.Path(ref, "reference")
	s.Identifiers(dicomio.Identifiers{PatientName: "DOE^JANE", PatientID: "12345678", PatientBirthDate: "19610203",
		StudyInstanceUID: "1.2.3.4", FrameOfReferenceUID: "1.2.3.4.5"})
	s.Text("QA for Jane Doe", Removed)
	cases := map[string]string{
		"reading " + ref + ": PixelSpacing":              "reading reference: PixelSpacing",
		"chose dose RD.plan.dcm in " + filepath.Dir(ref): "chose dose reference in " + FolderRemoved,
		"patient doe^jane (12345678) born 1961-02-03":    "patient " + k.Pseudonym(KindName, "DOE^JANE") + " (" + k.Pseudonym(KindID, "12345678") + ") born " + DateRemoved,
		"JANE's ROI PTV_DOE":                             NameRemoved + "'s ROI PTV_" + NameRemoved,
		"frames 1.2.3.4.5 and 1.2.3.4 and 1.2.3.4.6":     "frames " + k.UID("1.2.3.4.5") + " and " + k.UID("1.2.3.4") + " and 1.2.3.4.6",
		"series \"QA for Jane Doe\"":                     "series \"" + Removed + "\"",
		"123456789 and 912345678 stay, x12345678 too":    "123456789 and 912345678 stay, x12345678 too",
		"JANET and DOEs stay":                            "JANET and DOEs stay",
	}
	for in, want := range cases {
		if got := s.Scrub(in); got != want {
			t.Errorf("Scrub(%q)\n = %q\nwant %q", in, got, want)
		}
	}
	if got := run.Scrub("id 12345678"); got != "id "+k.Pseudonym(KindID, "12345678") {
		t.Errorf("run scrub while open: %q", got)
	}
	s.Close()
	if got := run.Scrub("id 12345678"); got != "id 12345678" {
		t.Errorf("run scrub after close: %q", got)
	}
}

// BenchmarkScrub: one log line through a case's scope (about 30 values)
// and through a flat watched folder's (5,000 file names).
func BenchmarkScrub(b *testing.B) {
	k := NewKey([]byte("0123456789abcdef-site-secret"), "bench")
	line := `time=2026-01-01T00:00:00Z level=INFO msg="case started" case=for-0123456789ab reference=/exports/qa/DOE_JANE_12345678/RD.plan.dcm evaluated=/exports/qa/DOE_JANE_12345678/RD.mc.dcm structures=""`
	for _, n := range []int{30, 5000} {
		s := NewRun(k).Scope()
		s.Identifiers(dicomio.Identifiers{PatientName: "DOE^JANE", PatientID: "12345678", StudyInstanceUID: "1.2.3.4", FrameOfReferenceUID: "1.2.3.5"})
		s.Path("/exports/qa/DOE_JANE_12345678/RD.plan.dcm", "reference")
		for i := 0; len(s.vals) < n; i++ {
			s.File(filepath.Join("/exports/qa", "export_"+strconv.Itoa(i)+".dcm"), FileRemoved)
		}
		b.Run(strconv.Itoa(n)+"values", func(b *testing.B) {
			b.SetBytes(int64(len(line)))
			for range b.N {
				s.Scrub(line)
			}
		})
	}
}
