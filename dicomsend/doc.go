// Package dicomsend sends files to a DICOM node by C-STORE (DICOM PS3.4
// annex B, Storage Service Class) with dcmtk's storescu, an existing and
// trusted implementation of the network protocol (PS3.7, PS3.8): voxgamma
// writes no DICOM networking of its own. A [Destination] is a called AE
// title, a host and a port, written AET@HOST:PORT; [Send] runs storescu
// once for a list of files, with timeouts, and reports its failure in one
// line naming the destination.
//
// Receiving is left to storescp (dcmtk's Storage SCP) writing into the
// folder `voxgamma watch` reads: see docs/dicom-network.md.
package dicomsend
