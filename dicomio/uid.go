package dicomio

import (
	"crypto/rand"
	"math/big"
	"time"
)

// UIDRoot is the root of every UID this package generates: "2.25." followed
// by the decimal form of a random 128-bit UUID is the UUID-derived UID form
// of ISO/IEC 9834-8 that DICOM PS3.5 annex B.2 allows without a registered
// root.
const UIDRoot = "2.25."

// ImplementationClassUID identifies voxgamma as the writer in the file meta
// header (PS3.10 section 7.1). It is a fixed UUID-derived UID.
const ImplementationClassUID = UIDRoot + "92900881502108398563829640173279820146"

// ImplementationVersionName is written beside [ImplementationClassUID].
const ImplementationVersionName = "VOXGAMMA_1"

// Names of the made-up phantom patient used for synthetic files when the
// caller gives none. They name no real person.
const (
	// DemoPatientName is the PatientName of the made-up phantom.
	DemoPatientName = "PHANTOM^HEAD"
	// DemoPatientID is the PatientID of the made-up phantom.
	DemoPatientID = "VG-DEMO-001"
)

// NewUID returns a new UID "2.25.<decimal of a random version-4 UUID>"
// (at most 44 characters; PS3.5 section 9 allows 64).
func NewUID() string {
	var b [16]byte
	if _, err := rand.Read(b[:]); err != nil {
		// crypto/rand does not fail on supported platforms; a UID that
		// might collide must never be written.
		panic("dicomio: no random source for UIDs: " + err.Error())
	}
	b[6] = b[6]&0x0F | 0x40 // version 4
	b[8] = b[8]&0x3F | 0x80 // RFC 4122 variant
	return UIDRoot + new(big.Int).SetBytes(b[:]).String()
}

// PhantomIdentifiers returns a consistent set of identifiers for a made-up
// phantom: the given patient name and ID (DemoPatientName and DemoPatientID
// when empty), patient sex "O", and new UIDs for the study, the frame of
// reference and the (made-up) RT Plan the doses belong to. Use the same
// Identifiers for every file of one synthetic case so they fit together.
func PhantomIdentifiers(patientName, patientID string) Identifiers {
	if patientName == "" {
		patientName = DemoPatientName
	}
	if patientID == "" {
		patientID = DemoPatientID
	}
	now := time.Now()
	return Identifiers{
		PatientName:         patientName,
		PatientID:           patientID,
		PatientSex:          "O",
		StudyInstanceUID:    NewUID(),
		StudyID:             "VG1",
		StudyDate:           now.Format("20060102"),
		StudyTime:           now.Format("150405"),
		FrameOfReferenceUID: NewUID(),
		ReferencedRTPlanUID: NewUID(),
	}
}
