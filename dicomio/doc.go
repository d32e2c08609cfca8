// Package dicomio reads and writes the DICOM RT files voxgamma works with:
// RT Dose grids, RT Structure Sets and RT Plans (DICOM PS3.3 annex A.18,
// A.19 and A.20). It
// decodes data sets with github.com/suyashkumar/dicom and adds what a dose
// comparison needs on top: a check of every element length against the
// file before anything is allocated, the dose grid geometry, and errors
// that name the file and the tag at fault.
//
// # Reading RT Dose
//
// [ReadDose] returns a volume.Grid of doses in Gy (or relative doses, when
// DoseUnits is RELATIVE: see [DoseInfo.Relative]) and a [DoseInfo]. It reads
//
//   - Modality (0008,0060), which must be RTDOSE;
//   - the Patient (C.7.1.1) and General Study (C.7.2.1) identifiers,
//     SeriesInstanceUID, SeriesDescription, Manufacturer,
//     ManufacturerModelName, SOPInstanceUID and the FrameOfReferenceUID
//     (0020,0052);
//   - Image Plane (C.7.6.2): ImagePositionPatient (0020,0032) is the origin,
//     ImageOrientationPatient (0020,0037) the directions of a row (index
//     axis i, columns) and of a column (index axis j, rows), PixelSpacing
//     (0028,0030) is [Δrow, Δcolumn] = [spacing along j, spacing along i];
//   - Image Pixel (C.7.6.3) and Multi-frame (C.7.6.6): Rows, Columns,
//     NumberOfFrames (1 when absent), BitsAllocated 16 or 32, BitsStored,
//     HighBit, PixelRepresentation (0 or 1), PixelData;
//   - RT Dose (C.8.8.3): DoseUnits, DoseType, DoseSummationType,
//     GridFrameOffsetVector (3004,000C), DoseGridScaling (3004,000E), and
//     the ReferencedRTPlanSequence (300C,0002).
//
// Frames lie along the normal row × column. A GridFrameOffsetVector whose
// first value is 0 holds offsets along the normal from ImagePositionPatient;
// otherwise it holds the absolute z of each frame (PS3.3 C.8.8.3.2), which
// is converted to offsets and needs the normal to run along patient z.
// Offsets may be irregular and may decrease (the grid's axis is then
// flipped, see package volume). A single-frame grid ignores the vector.
// Orientations must be axis-aligned (head-first or feet-first, supine or
// prone, any signed permutation of the patient axes); oblique grids are
// refused.
//
// Refused, each with an error naming the file and the tag: transfer
// syntaxes other than implicit and explicit VR little endian (PS3.5 section
// 10: big endian, deflate, RLE, JPEG family, ...); a missing or malformed
// geometry tag; PixelSpacing zero, negative or not finite;
// GridFrameOffsetVector of the wrong length or not monotonic; pixel data
// whose length is not Rows × Columns × NumberOfFrames × BitsAllocated/8;
// a header that claims more voxels than the file can hold (checked before
// the grid is allocated); DoseGridScaling missing, zero, negative or not
// finite; a dose that is not finite; a negative dose unless DoseType is
// ERROR. A panic inside the decoding is recovered and returned as an error.
// Oddities that do not change the values (a missing file meta header,
// NumberOfFrames absent, ...) are listed in DoseInfo.Notes.
//
// # Reading RT Structure Sets
//
// [ReadStructureSet] reads the Structure Set module (C.8.8.5:
// StructureSetLabel, ReferencedFrameOfReferenceSequence,
// StructureSetROISequence with ROINumber, ROIName and
// ReferencedFrameOfReferenceUID), the ROI Contour module (C.8.8.6:
// ROIContourSequence with ROIDisplayColor and ContourSequence:
// ContourGeometricType, NumberOfContourPoints, ContourData) and the RT ROI
// Observations module (C.8.8.8: RTROIInterpretedType). Every contour is
// kept with its geometric type. ContourData that is not x, y, z triplets,
// holds a non-finite value or disagrees with NumberOfContourPoints, and a
// ROIContourSequence item that refers to an undefined ROI, are errors.
//
// # Reading RT Plans
//
// [ReadPlan] reads an RT Plan or RT Ion Plan into a [Plan]: the RT General
// Plan module (C.8.8.9: RTPlanLabel, RTPlanName, RTPlanDescription, date,
// PlanIntent, RTPlanGeometry, the referenced structure set), the Approval
// module's ApprovalStatus, the RT Prescription module (C.8.8.10: every
// DoseReferenceSequence item with its type and TargetPrescriptionDose), the
// RT Fraction Scheme module (C.8.8.13: every fraction group with
// NumberOfFractionsPlanned and, per referenced beam, BeamMeterset and
// BeamDose) and the beams of the RT Beams or RT Ion Beams module (C.8.8.14,
// C.8.8.25: number, name, type, radiation, machine, delivery type, and the
// first control point's energy, gantry angle and isocentre). [Plan.Beam],
// [Plan.Prescriptions], [Plan.PrescriptionGy] and [FractionGroup.Meterset]
// answer the usual questions. Numbers that do not parse, are not finite or
// are negative, repeated beam, group or reference numbers and fraction
// groups that reference undefined beams are errors naming the tag.
//
// # Files without a file meta header
//
// Some systems write a bare data set, without the 128-byte preamble, "DICM"
// and file meta group of PS3.10 section 7.1. Such a file is read when its
// encoding is unambiguous: every element header of the whole file must parse,
// with tags in ascending order, as implicit VR little endian or as explicit
// VR little endian, and not both. The library is then handed the data set
// behind a file meta header stating the encoding found, so it never guesses.
//
// # Choosing files in a folder
//
// [ScanFolder] sorts the files of a directory by Modality; [Folder.ChooseFor]
// picks the plan dose (DoseSummationType PLAN before other whole-plan doses
// before beam or fraction doses), the structure set in its frame of
// reference and the RT Plan the dose names, with an account of what was
// chosen and ignored, and why. Maps
// of disagreement are never chosen: a dose with DoseType ERROR (PS3.3
// C.8.8.3: a difference between doses), which every gamma and difference
// map voxgamma writes is ([DoseInfo.DisagreementMap]), nor is the file
// given for the other role. A tie between doses of the best rank is broken
// by what their words say ([DoseOrigin]: the planning system's dose for the
// reference, an independent one for the evaluated dose) and is otherwise an
// error asking for a file. [SwapEvidence] tells when the files say that a
// reference and an evaluated dose are the wrong way round.
//
// # Doses in parts
//
// A folder that holds several parts of a dose and no whole-plan dose gives
// them all ([Choice.Doses]). [ReadDoseSet] checks from their headers that
// files belong together (one DoseSummationType among BEAM, BEAM_SESSION,
// FRACTION and FRACTION_SESSION; the same units, dose type, frame of
// reference, patient and referenced plan; no file, beam or fraction group
// twice) and [DoseSet.Sum] adds them voxel by voxel, on their grid when they
// share one, else after trilinear resampling onto a common grid that covers
// them all on the finest lattice ([DoseSet.Method] says which). Refusals
// are [DoseSetError]s naming the file at fault.
//
// # Consistency checks
//
// [CheckConsistency] compares a reference and an evaluated dose (and a
// structure set): frames of reference, dose units, summation types, and
// whether the evaluated grid covers the reference high-dose region.
//
// # Writing
//
// [WriteDose] writes a grid (a dose, a dose difference, a gamma map) as an
// RT Dose file with every mandatory module of the RT Dose IOD (PS3.3
// A.18.3: Patient, General Study, RT Series, Frame of Reference, General
// Equipment, General Image, Image Plane, Image Pixel, Multi-frame, RT Dose,
// SOP Common) in explicit VR little endian with a file meta header. How
// values are scaled into 16- or 32-bit integers, how NaN is written and how
// the geometry is written are described there. A DoseSummationType is
// written only with the references PS3.3 C.8.8.3 requires of it (a
// ReferencedRTPlanSequence for PLAN, FRACTION and BEAM, not present for
// other terms; a fraction group; a beam), else refused; maps take their
// reference's summation when it can be written so ([MapSummation]) and
// [MapSummationType] otherwise. [WriteStructureSet] writes an
// RT Structure Set (A.19), [WritePlan] an invented RT Plan (A.20) for
// demonstrations and tests. New UIDs are UUID-derived ("2.25." + the decimal
// of a random 128-bit UUID, ISO/IEC 9834-8, PS3.5 annex B.2); see [NewUID]
// and [PhantomIdentifiers] for a consistent set of identifiers for a
// made-up phantom. Every file is written atomically (internal/atomicfile).
package dicomio
