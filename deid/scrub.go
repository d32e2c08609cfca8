package deid

import (
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"
	"unicode"
	"unicode/utf8"

	"voxgamma/dicomio"
	"voxgamma/structure"
)

// Replacements written in place of what is removed from free text.
const (
	// Removed stands for a free-text description (series description,
	// dose comment, structure set label, a physician's name).
	Removed = "[removed]"
	// DateRemoved stands for a date.
	DateRemoved = "[date]"
	// IDRemoved stands for an identifier other than the patient ID
	// (study ID, accession number).
	IDRemoved = "[id]"
	// NameRemoved stands for one component of a person's name.
	NameRemoved = "[name]"
	// FolderRemoved stands for the folder an input lies in.
	FolderRemoved = "[folder]"
	// FileRemoved stands for a file name that has no role.
	FileRemoved = "[file]"
)

// minLen is the shortest value scrubbed from text: a single character is
// no identifier, and replacing it would wreck every message.
const minLen = 2

// entry is one identifying value and what replaces it.
type entry struct {
	lower, repl string
	// uid values continue across a dot: "1.2.3" is not found inside
	// "1.2.3.4".
	uid bool
}

// Run is the de-identification of one run of the program: its key, the
// values found in the inputs so far, and the scopes (one per case) open
// now. [Run.Scrub] removes every value of the run and of the open scopes
// from a text: the last defence of what a run prints.
type Run struct {
	// Key keys every pseudonym and remapped UID of the run.
	Key *Key
	mu  sync.Mutex
	// base holds run-wide values (paths given on the command line).
	base   *Scope
	active map[*Scope]bool
}

// NewRun starts the de-identification of a run with key.
func NewRun(key *Key) *Run {
	r := &Run{Key: key, active: map[*Scope]bool{}}
	r.base = &Scope{run: r, vals: map[string]entry{}}
	return r
}

// Base returns the run-wide scope: values registered there are scrubbed
// from every text of the run.
func (r *Run) Base() *Scope { return r.base }

// Scope opens a scope for one case: its values are scrubbed by
// [Scope.Scrub] and, until [Scope.Close], by [Run.Scrub].
func (r *Run) Scope() *Scope {
	s := &Scope{run: r, vals: map[string]entry{}}
	r.mu.Lock()
	r.active[s] = true
	r.mu.Unlock()
	return s
}

// Scrub replaces in text every value registered in the run-wide scope and
// in each open scope.
func (r *Run) Scrub(text string) string {
	r.mu.Lock()
	scopes := make([]*Scope, 0, len(r.active))
	for s := range r.active {
		scopes = append(scopes, s)
	}
	r.mu.Unlock()
	for _, s := range scopes {
		text = s.scrubOwn(text)
	}
	return r.base.scrubOwn(text)
}

// Scope is the set of identifying values of one case (or of the whole run)
// with their replacements. It is safe for concurrent use.
type Scope struct {
	run  *Run
	mu   sync.Mutex
	vals map[string]entry
	// byFirst holds the entries by the first byte of their lower-case
	// value, each list by decreasing length; nil when stale.
	byFirst map[byte][]entry
}

// Close ends the scope's part in [Run.Scrub] (its values stay scrubbed by
// its own [Scope.Scrub]).
func (s *Scope) Close() {
	s.run.mu.Lock()
	delete(s.run.active, s)
	s.run.mu.Unlock()
}

// Activate makes a closed scope part of [Run.Scrub] again (until the next
// Close): a long-lived scope (a watched folder's) takes part only while its
// case is handled.
func (s *Scope) Activate() {
	if s == s.run.base {
		return
	}
	s.run.mu.Lock()
	s.run.active[s] = true
	s.run.mu.Unlock()
}

// Key is the run's key.
func (s *Scope) Key() *Key { return s.run.Key }

// add registers value v, replaced by repl. A value registered twice keeps
// its first replacement, except that a role (a path's) takes the place of
// the generic [FileRemoved] and [FolderRemoved].
func (s *Scope) add(v, repl string, uid bool) {
	v = strings.TrimRight(v, "\x00 ")
	v = strings.TrimSpace(v)
	if len(v) < minLen {
		return
	}
	l := asciiLower(v)
	s.mu.Lock()
	defer s.mu.Unlock()
	if old, ok := s.vals[l]; ok {
		generic := old.repl == FileRemoved || old.repl == FolderRemoved
		if !generic || repl == FileRemoved || repl == FolderRemoved || strings.HasPrefix(repl, "[") {
			return
		}
	}
	s.vals[l] = entry{lower: l, repl: repl, uid: uid}
	s.byFirst = nil
}

// Text registers a free-text value (a description, a label) to be replaced
// by repl.
func (s *Scope) Text(v, repl string) { s.add(v, repl, false) }

// Name registers a person's name (DICOM PN: components separated by ^,
// groups by =): the whole name is replaced by its pseudonym, each
// component of two characters or more by [NameRemoved] (a name written
// "Jane Doe" in a description loses both parts).
func (s *Scope) Name(v string) {
	v = strings.TrimRight(v, "\x00 ")
	if v == "" {
		return
	}
	s.add(v, s.run.Key.Pseudonym(KindName, v), false)
	s.add(strings.TrimRight(v, "^="), s.run.Key.Pseudonym(KindName, v), false)
	for _, c := range strings.FieldsFunc(v, func(r rune) bool { return r == '^' || r == '=' || r == ' ' }) {
		s.add(c, NameRemoved, false)
	}
}

// PatientID registers a patient ID, replaced by its pseudonym.
func (s *Scope) PatientID(v string) {
	s.add(v, s.run.Key.Pseudonym(KindID, v), false)
}

// UID registers a UID, replaced by its keyed stand-in ([Key.UID]).
func (s *Scope) UID(v string) {
	s.add(v, s.run.Key.UID(v), true)
}

// Date registers a DICOM date (YYYYMMDD), also as YYYY-MM-DD and
// YYYY.MM.DD, replaced by [DateRemoved].
func (s *Scope) Date(v string) {
	v = strings.TrimSpace(strings.TrimRight(v, "\x00 "))
	s.add(v, DateRemoved, false)
	if len(v) == 8 && strings.IndexFunc(v, func(r rune) bool { return r < '0' || r > '9' }) < 0 {
		s.add(v[:4]+"-"+v[4:6]+"-"+v[6:], DateRemoved, false)
		s.add(v[:4]+"."+v[4:6]+"."+v[6:], DateRemoved, false)
	}
}

// Identifiers registers the patient, study and frame of reference
// identifiers of a DICOM file.
func (s *Scope) Identifiers(id dicomio.Identifiers) {
	s.Name(id.PatientName)
	s.PatientID(id.PatientID)
	s.Date(id.PatientBirthDate)
	s.Date(id.StudyDate)
	s.Text(id.StudyID, IDRemoved)
	s.Text(id.AccessionNumber, IDRemoved)
	for _, c := range strings.FieldsFunc(id.ReferringPhysicianName, func(r rune) bool { return r == '^' || r == '=' || r == ' ' }) {
		s.add(c, NameRemoved, false)
	}
	s.UID(id.StudyInstanceUID)
	s.UID(id.FrameOfReferenceUID)
	s.UID(id.ReferencedRTPlanUID)
}

// Dose registers what an RT Dose header identifies: the identifiers, the
// instance and series UIDs, the series description and the dose comment.
func (s *Scope) Dose(info *dicomio.DoseInfo) {
	if info == nil {
		return
	}
	s.Identifiers(info.Identifiers)
	s.UID(info.SOPInstanceUID)
	s.UID(info.SeriesInstanceUID)
	s.Text(info.SeriesDescription, Removed)
	s.Text(info.DoseComment, Removed)
}

// Structures registers what a structure set identifies: its patient and
// study identifiers, UIDs and label. ROI names are kept (they name the
// anatomy, and are the results' subject), but scrubbed of every value
// registered.
func (s *Scope) Structures(set *structure.Set) {
	if set == nil {
		return
	}
	s.Name(set.PatientName)
	s.PatientID(set.PatientID)
	s.UID(set.SOPInstanceUID)
	s.UID(set.FrameOfReferenceUID)
	for _, r := range set.ROIs {
		s.UID(r.FrameOfReferenceUID)
	}
	s.Text(set.Label, Removed)
}

// Path registers a file or folder path given for a role ("reference",
// "evaluated", "structures", ...): the path as written, absolute and with
// symbolic links resolved, and its base name, are replaced by the role;
// the folder it lies in (as written, absolute, resolved) by
// [FolderRemoved]. For a folder, the name of each file in it is replaced by
// [FileRemoved]: clinics name folders and files after patients.
func (s *Scope) Path(p, role string) {
	if p == "" {
		return
	}
	for _, f := range pathForms(p) {
		s.add(f, role, false)
		if d := filepath.Dir(f); d != "/" && d != "." {
			s.add(d, FolderRemoved, false)
		}
	}
	s.add(filepath.Base(p), role, false)
	if st, err := os.Stat(p); err == nil && st.IsDir() {
		if entries, err := os.ReadDir(p); err == nil {
			for _, e := range entries {
				s.add(e.Name(), FileRemoved, false)
			}
		}
	}
}

// File registers a file that has no role of its own (a file of a watched
// folder), replaced by repl, as [Scope.Path] does.
func (s *Scope) File(p, repl string) {
	for _, f := range pathForms(p) {
		s.add(f, repl, false)
	}
	s.add(filepath.Base(p), repl, false)
}

func pathForms(p string) []string {
	out := []string{p, filepath.Clean(p)}
	if a, err := filepath.Abs(p); err == nil {
		out = append(out, a)
		if r, err := filepath.EvalSymlinks(a); err == nil {
			out = append(out, r)
		}
	}
	return out
}

// Scrub replaces in text every value registered in this scope and in the
// run-wide scope.
func (s *Scope) Scrub(text string) string {
	if s != s.run.base {
		text = s.scrubOwn(text)
	}
	return s.run.base.scrubOwn(text)
}

func (s *Scope) entries() map[byte][]entry {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.byFirst == nil {
		s.byFirst = map[byte][]entry{}
		for _, e := range s.vals {
			s.byFirst[e.lower[0]] = append(s.byFirst[e.lower[0]], e)
		}
		for _, list := range s.byFirst {
			sort.Slice(list, func(i, j int) bool {
				if len(list[i].lower) != len(list[j].lower) {
					return len(list[i].lower) > len(list[j].lower)
				}
				return list[i].lower < list[j].lower
			})
		}
	}
	return s.byFirst
}

// scrubOwn replaces this scope's values in text: matches ignore ASCII
// case, start and end at a boundary (the neighbouring characters are not
// letters or digits, nor dots for a UID), and the longest value wins.
func (s *Scope) scrubOwn(text string) string {
	es := s.entries()
	if len(es) == 0 || text == "" {
		return text
	}
	lower := asciiLower(text)
	var b strings.Builder
	last := 0
	for i := 0; i < len(text); {
		if i > 0 && wordByte(text[i-1]) && wordByte(text[i]) {
			i++ // inside a word: no match starts here
			continue
		}
		matched := false
		for _, e := range es[lower[i]] {
			n := len(e.lower)
			if i+n > len(text) || lower[i:i+n] != e.lower {
				continue
			}
			if !atBoundary(text, i, i+n, e.uid) {
				continue
			}
			b.WriteString(text[last:i])
			b.WriteString(e.repl)
			i += n
			last = i
			matched = true
			break
		}
		if !matched {
			i++
		}
	}
	if last == 0 {
		return text
	}
	b.WriteString(text[last:])
	return b.String()
}

// wordByte reports whether c is an ASCII letter or digit.
func wordByte(c byte) bool {
	return c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c >= '0' && c <= '9'
}

func wordRune(r rune, uid bool) bool {
	return unicode.IsLetter(r) || unicode.IsDigit(r) || uid && r == '.'
}

// atBoundary reports whether text[i:j] stands apart from its neighbours.
func atBoundary(text string, i, j int, uid bool) bool {
	if i > 0 {
		r, _ := utf8.DecodeLastRuneInString(text[:i])
		if wordRune(r, uid) && wordRune(rune(text[i]), false) {
			return false
		}
	}
	if j < len(text) {
		r, _ := utf8.DecodeRuneInString(text[j:])
		last, _ := utf8.DecodeLastRuneInString(text[:j])
		if wordRune(r, uid) && wordRune(last, false) {
			return false
		}
	}
	return true
}

// asciiLower lower-cases ASCII letters only, so that byte offsets stay
// those of the original.
func asciiLower(s string) string {
	b := []byte(s)
	for i, c := range b {
		if c >= 'A' && c <= 'Z' {
			b[i] = c + 'a' - 'A'
		}
	}
	return string(b)
}

// Seen registers a file as analysis.Inputs.Seen reports it: its path for
// its role ([FileRemoved] for a file of a folder that has none), and what
// its header identifies.
func (s *Scope) Seen(role, path string, dose *dicomio.DoseInfo, set *structure.Set) {
	if role == "" {
		s.File(path, FileRemoved)
	} else {
		s.Path(path, role)
	}
	s.Dose(dose)
	s.Structures(set)
}
