// Package deid de-identifies what voxgamma writes, after the intent of the
// DICOM Basic Application Level Confidentiality Profile (PS3.15 Annex E):
// patient names and IDs become keyed pseudonyms, birth dates, study dates
// and free-text descriptions are removed, UIDs are remapped consistently
// within a run, and file and folder names (clinics name them after
// patients) are replaced by role names or keyed tokens.
//
// Every pseudonym is an HMAC-SHA-256 of the value under a [Key]: a site
// secret (--site-key FILE or the environment variable VOXGAMMA_SITE_KEY),
// so that the same patient gets the same pseudonym in every run of a site
// and nobody without the secret can reverse a short ID by trying them all;
// or, without one, a random key drawn for the run.
//
// Structured fields are replaced where they are built (job, batch, the
// commands). Free text (warnings, notes, errors, log lines, ROI names) goes
// through a [Scope]: the identifying values of a case's input files are
// registered as they are read (paths first, then every header), and
// [Scope.Scrub] replaces each of them wherever it appears. [Run.Scrub]
// applies every open scope: the commands pass everything they print
// through it. See docs/patient-data.md.
package deid
