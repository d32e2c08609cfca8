#!/usr/bin/env python3
"""Writes voxgamma's shared test fixtures with pydicom and numpy.

    /usr/bin/python3 testdata/generate.py [OUT]

writes every file of testdata/ except README.md, this script and the golden
results (golden/*.json, which voxgamma itself writes: see README.md) into
OUT, by default the folder of this script. internal/fixture's
TestGeneratorReproduces runs it into a temporary folder and compares every
file with the checked-in one, byte for byte.

The output is deterministic for a given pydicom and numpy: every UID is
derived from a fixed name (2.25 and the decimal UUID, DICOM PS3.5 B.2,
uuid5 of the name), no date or time of the run is written, the file meta's
ImplementationClassUID and ImplementationVersionName are set here rather
than left to pydicom (which would write its own version), every DS and IS
value is formatted here as a string, and the pixel data are numpy arrays
written little endian. Everything is invented: phantom patients
(PHANTOM^TESTDATA, VG-TESTDATA-001), no patient data.

What the files are, and what the tests check with them, is in README.md.
"""
import json
import os
import struct
import sys
import uuid

import numpy as np
import pydicom
from pydicom.dataset import Dataset, FileDataset, FileMetaDataset
from pydicom.sequence import Sequence
from pydicom.tag import Tag
from pydicom.uid import ExplicitVRLittleEndian

RTDOSE = "1.2.840.10008.5.1.4.1.1.481.2"
RTSTRUCT = "1.2.840.10008.5.1.4.1.1.481.3"
RTPLAN = "1.2.840.10008.5.1.4.1.1.481.5"
RTIONPLAN = "1.2.840.10008.5.1.4.1.1.481.8"
IMPLEMENTATION_UID = "2.25.%d" % uuid.uuid5(uuid.NAMESPACE_URL, "https://voxgamma.invalid/testdata/implementation").int
IMPLEMENTATION_NAME = "VG_TESTDATA_1"
PATIENT = ("PHANTOM^TESTDATA", "VG-TESTDATA-001")
HFS = [1, 0, 0, 0, 1, 0]


def uid(name):
    """A fixed UID for a name: 2.25 and the decimal form of uuid5 (PS3.5 B.2)."""
    return "2.25.%d" % uuid.uuid5(uuid.NAMESPACE_URL, "https://voxgamma.invalid/testdata/" + name).int


def ds_str(v):
    """A DS value as written: at most 10 significant digits (PS3.5 6.2: at most 16 bytes)."""
    return "%.10g" % v


def item(**kw):
    d = Dataset()
    for k, v in kw.items():
        setattr(d, k, v)
    return d


def write(path, ds, sop_class, sop):
    """Writes ds as a DICOM file (PS3.10): preamble, "DICM", a file meta
    group with fixed implementation identifiers, explicit VR little endian."""
    meta = FileMetaDataset()
    meta.MediaStorageSOPClassUID = sop_class
    meta.MediaStorageSOPInstanceUID = sop
    meta.TransferSyntaxUID = ExplicitVRLittleEndian
    meta.ImplementationClassUID = IMPLEMENTATION_UID
    meta.ImplementationVersionName = IMPLEMENTATION_NAME
    out = FileDataset(path, {}, file_meta=meta, preamble=b"\0" * 128)
    out.update(ds)
    out.SOPClassUID, out.SOPInstanceUID = sop_class, sop
    out.is_little_endian, out.is_implicit_VR = True, False
    os.makedirs(os.path.dirname(path), exist_ok=True)
    try:
        pydicom.dcmwrite(path, out, enforce_file_format=True)  # pydicom 3
    except TypeError:
        pydicom.dcmwrite(path, out, write_like_original=False)  # pydicom 2


def common(ds, case, modality, series, description):
    ds.PatientName, ds.PatientID = PATIENT
    ds.StudyInstanceUID = uid(case + "/study")
    ds.SeriesInstanceUID = uid(case + "/series/" + series)
    ds.StudyID, ds.SeriesNumber, ds.InstanceNumber = "1", "1", "1"
    ds.Modality = modality
    ds.Manufacturer = "voxgamma testdata (pydicom)"
    ds.SeriesDescription = description


def rtdose(path, case, name, values, ipp, ps, frame_offsets, iop=HFS, units="GY", dose_type="PHYSICAL",
           summation="PLAN", plan=None, fraction_group=None, comment=None, frame=None):
    """An RT Dose of the dose values [frame][row][column] (Gy, float64).

    Positions follow PS3.3 C.7.6.2.1.1 and C.8.8.3.2: voxel (i, j, k) lies at
    ImagePositionPatient + i·Δcol·row + j·Δrow·column + offset_k·(row ×
    column), PixelSpacing = [Δrow, Δcol]. Unsigned 16-bit values with
    DoseGridScaling = max/65000 written to 7 significant digits; a dose with
    negative values (DoseType ERROR only, C.8.8.3.4) is signed 16-bit with
    max|D|/32000. Returns what the tests need to bound the quantisation: the
    scaling written, the largest |stored × scaling − D| (float64) and the
    largest dose."""
    values = np.asarray(values, dtype=np.float64)
    frames, rows, cols = values.shape
    signed = values.min() < 0
    top = np.abs(values).max()
    scaling_str = "%.6e" % ((top / (32000 if signed else 65000)) if top > 0 else 1e-5)
    scaling = float(scaling_str)
    codes = np.rint(values / scaling)
    ds = Dataset()
    common(ds, case, "RTDOSE", name, "%s dose, %s" % (name, case))
    ds.FrameOfReferenceUID = frame or uid(case + "/frame")
    ds.PositionReferenceIndicator = ""
    ds.ImagePositionPatient = [ds_str(v) for v in ipp]
    ds.ImageOrientationPatient = [ds_str(v) for v in iop]
    ds.PixelSpacing = [ds_str(ps[0]), ds_str(ps[1])]
    ds.SliceThickness = ds_str(abs(frame_offsets[1] - frame_offsets[0]) if len(frame_offsets) > 1 else 1)
    ds.SamplesPerPixel = 1
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.NumberOfFrames = str(frames)
    ds.FrameIncrementPointer = Tag(0x3004, 0x000C)
    ds.Rows, ds.Columns = rows, cols
    ds.BitsAllocated, ds.BitsStored, ds.HighBit = 16, 16, 15
    ds.PixelRepresentation = 1 if signed else 0
    ds.DoseUnits, ds.DoseType, ds.DoseSummationType = units, dose_type, summation
    if comment:
        ds.DoseComment = comment
    ds.GridFrameOffsetVector = [ds_str(v) for v in frame_offsets]
    ds.DoseGridScaling = scaling_str
    if plan:
        ref = item(ReferencedSOPClassUID=RTPLAN, ReferencedSOPInstanceUID=plan)
        if fraction_group:
            ref.ReferencedFractionGroupSequence = Sequence([item(ReferencedFractionGroupNumber=str(fraction_group))])
        ds.ReferencedRTPlanSequence = Sequence([ref])
    ds.PixelData = codes.astype("<i2" if signed else "<u2").tobytes()
    write(path, ds, RTDOSE, uid(case + "/dose/" + name))
    return {"file": os.path.basename(path), "dims": [cols, rows, frames], "dose_grid_scaling": scaling,
            "max_quantisation_error_gy": float(np.abs(codes * scaling - values).max()), "max_gy": float(values.max())}


def sphere_contours(centre, radius, planes, n):
    """Polygons of n vertices on the sphere's circles in the given planes:
    vertex m at angle 2πm/n on the circle of radius √(r² − dz²)."""
    out = []
    for z in planes:
        r2 = radius * radius - (z - centre[2]) ** 2
        if r2 <= 0:
            continue
        r = np.sqrt(r2)
        pts = []
        for m in range(n):
            t = 2 * np.pi * m / n
            pts.append((centre[0] + r * np.cos(t), centre[1] + r * np.sin(t), z))
        out.append(("CLOSED_PLANAR", pts))
    return out


def rtstruct(path, case, name, rois, frame=None, label="VG_TESTDATA"):
    """An RT Structure Set. rois: dicts with number, name, type, frame
    (default the set's), contours [(geometric type, [(x, y, z), ...])]."""
    frame = frame or uid(case + "/frame")
    ds = Dataset()
    common(ds, case, "RTSTRUCT", name, "structures, " + case)
    ds.FrameOfReferenceUID = frame
    ds.PositionReferenceIndicator = ""
    ds.StructureSetLabel = label
    ds.ReferencedFrameOfReferenceSequence = Sequence([item(FrameOfReferenceUID=frame)])
    ds.StructureSetROISequence = Sequence([
        item(ROINumber=str(r["number"]), ReferencedFrameOfReferenceUID=r.get("frame", frame), ROIName=r["name"],
             ROIGenerationAlgorithm="") for r in rois])
    contours = []
    for r in rois:
        cs = []
        for c, (kind, pts) in enumerate(r["contours"]):
            cs.append(item(ContourGeometricType=kind, NumberOfContourPoints=str(len(pts)), ContourNumber=str(c + 1),
                           ContourData=[ds_str(round(v, 4)) for p in pts for v in p]))
        rc = item(ROIDisplayColor=["200", "50", "50"], ReferencedROINumber=str(r["number"]))
        if cs:
            rc.ContourSequence = Sequence(cs)
        contours.append(rc)
    ds.ROIContourSequence = Sequence(contours)
    ds.RTROIObservationsSequence = Sequence([
        item(ObservationNumber=str(i + 1), ReferencedROINumber=str(r["number"]), RTROIInterpretedType=r["type"], ROIInterpreter="")
        for i, r in enumerate(rois)])
    # Sequences and items of undefined length, closed by delimitation items
    # (PS3.5 7.5), as many planning systems write them; the RT Doses keep
    # pydicom's explicit lengths, so the truncation tests cut both kinds.
    def undefined(d):
        for el in d:
            if el.VR == "SQ":
                el.is_undefined_length = True
                for it in el.value:
                    it.is_undefined_length_sequence_item = True
                    undefined(it)
    undefined(ds)
    write(path, ds, RTSTRUCT, uid(case + "/structures/" + name))


def offsets(n, first, step):
    return [first + k * step for k in range(n)]


def flat(dims, d):
    cols, rows, frames = dims
    return np.full((frames, rows, cols), float(d))


# ---------------------------------------------------------------------------
# The uniform case: a flat reference dose inside a larger flat evaluated
# dose, and a spherical target. With global criteria δ = 3 % of the
# reference maximum D, an evaluated dose k·D gives Γ = |k − 1|·D/(δ·D) =
# |k − 1|/δ at every point (domain notes, "closed form": in a flat region the
# nearest evaluated value is the same everywhere, so the search ends at
# distance 0): k = 1.02 gives Γ = 2/3 (every point passes), k = 0.95 gives
# Γ = 5/3 (every point fails).

UNIFORM_REF = dict(dims=(12, 12, 8), ipp=(-11, -11, -7))
UNIFORM_EVAL = dict(dims=(22, 22, 18), ipp=(-21, -21, -17))


def uniform_structures(rois=None, frame=None):
    ptv = {"number": 1, "name": "PTV_1", "type": "PTV",
           "contours": sphere_contours((0, 0, 0), 5, [-3, -1, 1, 3], 32)}
    return [ptv] + (rois or [])


def uniform(out):
    case = "uniform"
    d = os.path.join(out, "dicom", case)
    plan = uid(case + "/plan")
    info = {"case": case, "closed_form": "flat reference D = 2 Gy; evaluated k·D; global 3 %/2 mm: Γ = |k − 1|/0.03 everywhere",
            "frame_of_reference_uid": uid(case + "/frame"), "other_frame_of_reference_uid": uid(case + "/other-frame")}
    info["reference"] = rtdose(os.path.join(d, "RD_reference.dcm"), case, "reference", flat(UNIFORM_REF["dims"], 2),
                               UNIFORM_REF["ipp"], (2, 2), offsets(8, 0, 2), plan=plan)
    info["evaluated"] = rtdose(os.path.join(d, "RD_evaluated.dcm"), case, "evaluated", flat(UNIFORM_EVAL["dims"], 2.04),
                               UNIFORM_EVAL["ipp"], (2, 2), offsets(18, 0, 2))
    info["evaluated"]["k"] = 1.02
    info["evaluated_fail"] = rtdose(os.path.join(d, "RD_evaluated_fail.dcm"), case, "evaluated-fail",
                                    flat(UNIFORM_EVAL["dims"], 1.9), UNIFORM_EVAL["ipp"], (2, 2), offsets(18, 0, 2))
    info["evaluated_fail"]["k"] = 0.95
    # The reference as a fraction group's dose (DoseSummationType FRACTION,
    # the plan's fraction group 1), and naming no plan.
    rtdose(os.path.join(d, "RD_reference_fraction.dcm"), case, "reference-fraction", flat(UNIFORM_REF["dims"], 2),
           UNIFORM_REF["ipp"], (2, 2), offsets(8, 0, 2), summation="FRACTION", plan=plan, fraction_group=1)
    rtdose(os.path.join(d, "RD_reference_no_plan.dcm"), case, "reference-no-plan", flat(UNIFORM_REF["dims"], 2),
           UNIFORM_REF["ipp"], (2, 2), offsets(8, 0, 2))
    rtstruct(os.path.join(d, "RS.dcm"), case, "structures", uniform_structures())
    info["structures"] = {"file": "RS.dcm", "rois": [{"name": "PTV_1", "type": "PTV", "sphere_centre_mm": [0, 0, 0], "radius_mm": 5,
                                                      "planes_mm": [-3, -1, 1, 3], "points_per_contour": 32}]}
    info["plan"] = {"file": "RP.dcm", "sop_instance_uid": plan}
    head_and_neck_plan(os.path.join(d, "RP.dcm"), case, plan)
    with open(os.path.join(d, "case.json"), "w") as f:
        json.dump(info, f, indent=2, sort_keys=True)
        f.write("\n")


def head_and_neck_plan(path, case, sop):
    """An RT Plan named by the uniform reference dose: two TARGET
    prescriptions (60 and 50.4 Gy), an organ-at-risk reference, two
    fraction groups (25 and 5 fractions), three treatment beams and a setup
    beam."""
    ds = Dataset()
    common(ds, case, "RTPLAN", "plan", "plan, " + case)
    ds.FrameOfReferenceUID = uid(case + "/frame")
    ds.RTPlanLabel = "H&N_SIB"
    ds.RTPlanName = "Head and neck, two levels"
    ds.RTPlanGeometry = "TREATMENT_DEVICE"
    ds.ApprovalStatus = "APPROVED"
    ds.DoseReferenceSequence = Sequence([
        item(DoseReferenceNumber="1", DoseReferenceStructureType="SITE", DoseReferenceDescription="PTV_60", DoseReferenceType="TARGET", TargetPrescriptionDose="60"),
        item(DoseReferenceNumber="2", DoseReferenceStructureType="SITE", DoseReferenceDescription="PTV_50", DoseReferenceType="TARGET", TargetPrescriptionDose="50.4"),
        item(DoseReferenceNumber="3", DoseReferenceStructureType="SITE", DoseReferenceDescription="Cord", DoseReferenceType="ORGAN_AT_RISK", DeliveryMaximumDose="45"),
    ])
    beams = []
    for num, name, gantry in [(1, "VMAT 1", "181"), (2, "VMAT 2", "179"), (3, "Boost", "90"), (9, "CBCT", "0")]:
        cp = item(ControlPointIndex="0", NominalBeamEnergy="6", GantryAngle=gantry, CumulativeMetersetWeight="0")
        beams.append(item(BeamNumber=str(num), BeamName=name, BeamType="DYNAMIC", RadiationType="PHOTON", TreatmentMachineName="LINAC_T",
                          PrimaryDosimeterUnit="MU", TreatmentDeliveryType="SETUP" if num == 9 else "TREATMENT",
                          NumberOfControlPoints="1", ControlPointSequence=Sequence([cp])))
    ds.BeamSequence = Sequence(beams)
    ds.FractionGroupSequence = Sequence([
        item(FractionGroupNumber="1", NumberOfFractionsPlanned="25", NumberOfBeams="2", NumberOfBrachyApplicationSetups="0",
             ReferencedBeamSequence=Sequence([item(ReferencedBeamNumber="1", BeamMeterset="301.25"), item(ReferencedBeamNumber="2", BeamMeterset="288.5")])),
        item(FractionGroupNumber="2", NumberOfFractionsPlanned="5", NumberOfBeams="1", NumberOfBrachyApplicationSetups="0",
             ReferencedBeamSequence=Sequence([item(ReferencedBeamNumber="3", BeamMeterset="150.75")])),
    ])
    write(path, ds, RTPLAN, sop)


# ---------------------------------------------------------------------------
# The linear-gradient case: D(x) = a + g·(n·x) with n = (2, −1, 2)/3, the
# evaluated dose the same field shifted by s along n. Γ² = s²/(Δd² +
# (ΔD/g)²) at every point (domain notes, "closed form"; derivation in
# gamma/gamma_test.go TestLinearGradientShift), whatever the grids'
# orientation: the reference is head-first supine with PixelSpacing
# [Δrow 2.5, Δcol 2] (not square, so a swapped order shows) and an
# absolute GridFrameOffsetVector; the evaluated dose is feet-first supine
# (rows along −x, frames along −z), 1.5 mm, with a relative one, reaching
# at least 9.75 mm beyond the reference on every side.

GRADIENT = dict(a=10.0, g=0.1, n=[2 / 3, -1 / 3, 2 / 3], shift=2.5)


def positions(ipp, iop, ps, gfov, rows, cols):
    ipp = np.asarray(ipp, dtype=float)
    row, col = np.asarray(iop[:3], dtype=float), np.asarray(iop[3:], dtype=float)
    normal = np.cross(row, col)
    gfov = np.asarray(gfov, dtype=float)
    off = gfov if gfov[0] == 0 else (gfov - ipp[2]) / normal[2]
    k, j, i = np.meshgrid(np.arange(len(gfov)), np.arange(rows), np.arange(cols), indexing="ij")
    return ipp + (i * ps[1])[..., None] * row + (j * ps[0])[..., None] * col + off[k][..., None] * normal


def gradient(out):
    case = "gradient"
    d = os.path.join(out, "dicom", case)
    a, g, n, s = GRADIENT["a"], GRADIENT["g"], np.asarray(GRADIENT["n"]), GRADIENT["shift"]
    info = {"case": case, "closed_form": "D(x) = a + g·(n·x); evaluated D(x) − g·shift; Γ² = shift²/(Δd² + (ΔD/g)²)",
            "a_gy": a, "g_gy_per_mm": g, "n": GRADIENT["n"], "shift_mm": s}
    ref = dict(ipp=(-13, -13.75, -10.5), iop=HFS, ps=(2.5, 2), gfov=offsets(8, -10.5, 3), rows=12, cols=14)
    ev = dict(ipp=(24.5, -25.25, 20.25), iop=[-1, 0, 0, 0, 1, 0], ps=(1.5, 1.5), gfov=offsets(28, 0, 1.5), rows=35, cols=34)
    pr = positions(ref["ipp"], ref["iop"], ref["ps"], ref["gfov"], ref["rows"], ref["cols"])
    pe = positions(ev["ipp"], ev["iop"], ev["ps"], ev["gfov"], ev["rows"], ev["cols"])
    # n·x summed term by term, in this order: a matrix product (BLAS) may
    # sum in another order or fuse the multiply-adds, as the processor's
    # kernel chooses, and so write another last bit on another machine.
    dr = a + g * (pr[..., 0] * n[0] + pr[..., 1] * n[1] + pr[..., 2] * n[2])
    de = a + g * (pe[..., 0] * n[0] + pe[..., 1] * n[1] + pe[..., 2] * n[2]) - g * s
    info["reference"] = rtdose(os.path.join(d, "RD_reference.dcm"), case, "reference", dr, ref["ipp"], ref["ps"], ref["gfov"], iop=ref["iop"])
    info["evaluated"] = rtdose(os.path.join(d, "RD_evaluated.dcm"), case, "evaluated", de, ev["ipp"], ev["ps"], ev["gfov"], iop=ev["iop"])
    # The analytic reference dose of every voxel, frame-major, row-major
    # (column fastest), float64 little endian: the local criterion's ΔD.
    dr.astype("<f8").tofile(os.path.join(d, "reference_analytic.f64"))
    info["reference"]["analytic"] = "reference_analytic.f64"
    with open(os.path.join(d, "case.json"), "w") as f:
        json.dump(info, f, indent=2, sort_keys=True)
        f.write("\n")


# ---------------------------------------------------------------------------
# RT Plans: a photon plan with two prescription levels, two fraction groups
# and a setup beam, and an RT Ion Plan with two proton beams.

def plans(out):
    d = os.path.join(out, "dicom", "plans")
    for kind in ("photon", "ion"):
        ion = kind == "ion"
        ds = Dataset()
        ds.PatientName = "PHANTOM^PELVIS"
        ds.PatientID = "VG-PLAN-001"
        ds.Modality = "RTPLAN"
        ds.StudyInstanceUID = "2.25.4243"
        ds.SeriesInstanceUID = "2.25.4244"
        ds.FrameOfReferenceUID = "2.25.4245"
        ds.RTPlanLabel = "PROST_SIB" if not ion else "PROTON_2F"
        ds.RTPlanName = "Prostate and nodes, SIB" if not ion else "Two proton fields"
        ds.RTPlanDescription = "invented plan for tests"
        ds.RTPlanDate = "20240102"
        ds.RTPlanTime = "101112"
        ds.PlanIntent = "CURATIVE"
        ds.RTPlanGeometry = "PATIENT"
        ds.ReferencedStructureSetSequence = Sequence([item(ReferencedSOPClassUID=RTSTRUCT, ReferencedSOPInstanceUID="2.25.4246")])
        ds.ApprovalStatus = "APPROVED"
        ds.DoseReferenceSequence = Sequence([
            item(DoseReferenceNumber="1", DoseReferenceUID="2.25.4247", DoseReferenceStructureType="VOLUME", ReferencedROINumber="3",
                 DoseReferenceDescription="PTV_70", DoseReferenceType="TARGET", TargetPrescriptionDose="70.0", DeliveryMaximumDose="74.9"),
            item(DoseReferenceNumber="2", DoseReferenceStructureType="VOLUME", ReferencedROINumber="4",
                 DoseReferenceDescription="PTV_56", DoseReferenceType="TARGET", TargetPrescriptionDose="56.0"),
            item(DoseReferenceNumber="3", DoseReferenceStructureType="SITE", DoseReferenceDescription="Rectum",
                 DoseReferenceType="ORGAN_AT_RISK", DeliveryMaximumDose="72.5"),
        ])
        if ion:
            beams = [(1, "RAO", "270", "160.5"), (2, "LAO", "90", "150.25")]
            groups = [(1, 39, [(1, "1.25e9", "0.9"), (2, "1.5e9", "0.9")])]
        else:
            beams = [(1, "Arc CW", "181", "6"), (2, "Arc CCW", "179", "6"), (3, "Boost", "0", "10")]
            groups = [(1, 28, [(1, "312.4", "1.0"), (2, "298.75", "1.0")]), (2, 5, [(3, "150.5", None)])]
        bs = []
        for num, name, gantry, energy in beams:
            cp0 = item(ControlPointIndex="0", NominalBeamEnergy=energy, GantryAngle=gantry,
                       IsocenterPosition=["1.5", "-20.25", ds_str(30 + num)], CumulativeMetersetWeight="0")
            cp1 = item(ControlPointIndex="1", CumulativeMetersetWeight="1")
            b = item(BeamNumber=str(num), BeamName=name, BeamDescription="beam " + str(num),
                     BeamType="STATIC" if ion else "DYNAMIC", RadiationType="PROTON" if ion else "PHOTON",
                     TreatmentMachineName="MACHINE_" + str(num), PrimaryDosimeterUnit="NP" if ion else "MU",
                     TreatmentDeliveryType="TREATMENT", NumberOfControlPoints="2", FinalCumulativeMetersetWeight="1")
            if ion:
                b.IonControlPointSequence = Sequence([cp0, cp1])
            else:
                b.ControlPointSequence = Sequence([cp0, cp1])
            bs.append(b)
        if not ion:
            setup = item(ControlPointIndex="0", NominalBeamEnergy="6", GantryAngle="0", CumulativeMetersetWeight="0")
            bs.append(item(BeamNumber="99", BeamName="kV setup", BeamType="STATIC", RadiationType="PHOTON",
                           TreatmentDeliveryType="SETUP", NumberOfControlPoints="1", ControlPointSequence=Sequence([setup])))
        if ion:
            ds.IonBeamSequence = Sequence(bs)
        else:
            ds.BeamSequence = Sequence(bs)
        fgs = []
        for num, fx, refs in groups:
            rb = []
            for bn, ms, dose in refs:
                r = item(ReferencedBeamNumber=str(bn), BeamMeterset=ms)
                if dose is not None:
                    r.BeamDose = dose
                rb.append(r)
            fgs.append(item(FractionGroupNumber=str(num), FractionGroupDescription="group " + str(num), NumberOfFractionsPlanned=str(fx),
                            NumberOfBeams=str(len(refs)), NumberOfBrachyApplicationSetups="0", ReferencedBeamSequence=Sequence(rb)))
        ds.FractionGroupSequence = Sequence(fgs)
        write(os.path.join(d, "RP_%s.dcm" % kind), ds, RTIONPLAN if ion else RTPLAN, "2.25.4242" + ("2" if ion else "1"))


# ---------------------------------------------------------------------------
# The bad-input corpus (docs/bad-input.md): the uniform case's files, each
# damaged in one way, and files whose encoding is valid but whose content
# voxgamma must refuse or flag. Byte-level damage is done on the written
# file by walking its elements (PS3.5 7.1.2: explicit VR little endian; a
# 2-byte length for short VRs, 2 reserved bytes and a 4-byte length for OB,
# OW, SQ, UN, UT, ...; the sequences pydicom writes have explicit lengths,
# so changing a value's length rewrites the lengths of every sequence and
# item that holds it).

LONG_VRS = {b"OB", b"OD", b"OF", b"OL", b"OV", b"OW", b"SQ", b"UC", b"UN", b"UR", b"UT"}


UNDEFINED = 0xFFFFFFFF


def walk(data):
    """Every element of a file as (tag, vr, header offset, length field
    offset, length field size, value offset, value length, enclosing length
    fields [(offset, size), ...] of explicit length); items appear with vr
    None. Sequences and items of undefined length end with their
    delimitation items (PS3.5 7.5)."""
    out = []

    def elements(off, end, parents, meta):
        """Elements from off up to end, or, with end None, up to and
        including an Item Delimitation Item; returns the offset after."""
        while end is None or off < end:
            g, e = struct.unpack_from("<HH", data, off)
            if meta and g != 2:
                return off
            if end is None and (g, e) == (0xFFFE, 0xE00D):
                return off + 8
            vr = data[off + 4:off + 6]
            if vr in LONG_VRS:
                la, ls, val = off + 8, 4, off + 12
                vl = struct.unpack_from("<I", data, la)[0]
            else:
                la, ls, val = off + 6, 2, off + 8
                vl = struct.unpack_from("<H", data, la)[0]
            out.append(((g << 16) | e, vr, off, la, ls, val, vl, parents))
            if vr != b"SQ":
                off = val + vl
                continue
            inner = parents if vl == UNDEFINED else parents + [(la, ls)]
            ioff = val
            while vl == UNDEFINED or ioff < val + vl:
                ig, ie, ivl = struct.unpack_from("<HHI", data, ioff)
                if (ig, ie) == (0xFFFE, 0xE0DD):  # Sequence Delimitation Item
                    ioff += 8
                    break
                assert (ig, ie) == (0xFFFE, 0xE000)
                out.append((0xFFFEE000, None, ioff, ioff + 4, 4, ioff + 8, ivl, inner))
                if ivl == UNDEFINED:
                    ioff = elements(ioff + 8, None, inner, False)
                else:
                    elements(ioff + 8, ioff + 8 + ivl, inner + [(ioff + 4, 4)], False)
                    ioff += 8 + ivl
            off = ioff
        return off

    off = elements(132, len(data), [], True)
    elements(off, len(data), [], False)
    return out


def find(data, tag, nth=0):
    """The nth (from 0) element with the tag, at any depth."""
    for el in walk(data):
        if el[0] == tag:
            if nth == 0:
                return el
            nth -= 1
    raise KeyError("no element %08X" % tag)


def put_len(b, at, size, v):
    struct.pack_into("<H" if size == 2 else "<I", b, at, v)


def set_value(data, tag, value, nth=0):
    """The nth element with the tag given a new value; its length, and those
    of the sequences and items holding it, rewritten."""
    _, _, _, la, ls, val, vl, parents = find(data, tag, nth)
    delta = len(value) - vl
    b = bytearray(data[:val] + value + data[val + vl:])
    put_len(b, la, ls, len(value))
    for at, size in parents:
        put_len(b, at, size, struct.unpack_from("<H" if size == 2 else "<I", b, at)[0] + delta)
    return bytes(b)


def text(s):
    """A text value padded with a space to even length (PS3.5 6.2)."""
    s = s.encode("ascii")
    return s + b" " if len(s) % 2 else s


def set_text(data, tag, s, nth=0):
    return set_value(data, tag, text(s), nth)


def set_us(data, tag, v):
    return set_value(data, tag, struct.pack("<H", v))


def set_length(data, tag, vl, nth=0):
    """Only the length field rewritten: a length that lies about its value."""
    _, _, _, la, ls, _, _, _ = find(data, tag, nth)
    b = bytearray(data)
    put_len(b, la, ls, vl)
    return bytes(b)


def insert(data, tag, vr, value):
    """A top-level text element (explicit VR, short header: PS3.5 7.1.2)
    inserted where its tag belongs in ascending order."""
    v = text(value)
    for t, evr, hdr, _, _, _, _, parents in walk(data):
        if t >> 16 != 2 and not parents and evr is not None and t > tag:
            return data[:hdr] + struct.pack("<HH2sH", tag >> 16, tag & 0xFFFF, vr.encode("ascii"), len(v)) + v + data[hdr:]
    raise KeyError("no element after %08X" % tag)


def drop(data, tag):
    """The first top-level element with the tag removed."""
    t, vr, hdr, _, _, val, vl, parents = find(data, tag)
    assert not parents and vr != b"SQ"
    return data[:hdr] + data[val + vl:]


def contour_value(data, contour, index, new):
    """Value index (from 0) of the ContourData of the nth contour in the
    file replaced by new."""
    _, _, _, _, _, val, vl, _ = find(data, 0x30060050, contour)
    values = data[val:val + vl].rstrip(b" ").split(b"\\")
    values[index] = new.encode("ascii")
    return set_value(data, 0x30060050, text(b"\\".join(values).decode("ascii")), contour)


# Tags (PS3.6) of the elements damaged.
MODALITY, MANUFACTURER, STUDY_UID, IPP, IOP, FRAME_UID = 0x00080060, 0x00080070, 0x0020000D, 0x00200032, 0x00200037, 0x00200052
RESCALE_INTERCEPT, RESCALE_SLOPE = 0x00281052, 0x00281053
FRAMES, ROWS, COLUMNS, PIXEL_SPACING = 0x00280008, 0x00280010, 0x00280011, 0x00280030
DOSE_UNITS, DOSE_TYPE, GFOV, SCALING = 0x30040002, 0x30040004, 0x3004000C, 0x3004000E
ROI_NUMBER, REF_ROI_NUMBER, RT_PLAN_SEQ, PIXEL_DATA = 0x30060022, 0x30060084, 0x300C0002, 0x7FE00010


def bad_input(out):
    case = "uniform"
    d = os.path.join(out, "bad-input")
    os.makedirs(d, exist_ok=True)
    base = os.path.join(out, "dicom", case)
    ref = open(os.path.join(base, "RD_reference.dcm"), "rb").read()
    ev = open(os.path.join(base, "RD_evaluated.dcm"), "rb").read()
    rs = open(os.path.join(base, "RS.dcm"), "rb").read()

    def put(name, data):
        with open(os.path.join(d, name), "wb") as f:
            f.write(data)

    # Not DICOM (PS3.10 7.1: "DICM" at offset 128).
    put("text.dcm", b"plan notes, not a DICOM file\n")
    put("empty.dcm", b"")
    junk, x = bytearray(4096), 12345  # a linear congruential generator
    for i in range(len(junk)):
        x = (x * 1664525 + 1013904223) & 0xFFFFFFFF
        junk[i] = x >> 24
    put("noise.dcm", bytes(junk))
    os.makedirs(os.path.join(d, "folder_without_dose"), exist_ok=True)
    put("folder_without_dose/notes.txt", b"no dose here\n")

    # Of another kind (PS3.3 C.8.8.1 Modality).
    put("Modality_CT.dcm", set_text(ref, MODALITY, "CT"))
    put("Modality_missing.dcm", drop(ref, MODALITY))

    # Lengths beyond the file or the container (PS3.5 7.1).
    put("PixelData_length_beyond_file.dcm", set_length(ref, PIXEL_DATA, 0xFFFFFFF0))
    put("DS_length_overruns.dcm", set_length(ref, PIXEL_SPACING, 0xFFF0))
    item = find(ref, RT_PLAN_SEQ)[5]  # the value of the sequence: its first item
    b = bytearray(ref)
    struct.pack_into("<I", b, item + 4, 0x7FFFFFF0)
    put("item_length_beyond_file.dcm", bytes(b))
    put("meta_length_beyond_file.dcm", set_length(ref, 0x00020003, 0xFFF0))
    put("voxel_count_beyond_file.dcm", set_text(set_us(set_us(ref, ROWS, 65535), COLUMNS, 65535), FRAMES, "99999"))
    put("NumberOfFrames_overflow.dcm", set_text(ref, FRAMES, "99999999999999999999"))
    put("NumberOfFrames_negative.dcm", set_text(ref, FRAMES, "-8"))
    px = find(ref, PIXEL_DATA)
    put("truncated_in_PixelData.dcm", ref[:px[5] + px[6] // 2])

    # Geometry (PS3.3 C.7.6.2, C.7.6.2.1.1, C.8.8.3.2).
    for name, tag, v in [
        ("PixelSpacing_zero", PIXEL_SPACING, "0\\2"), ("PixelSpacing_negative", PIXEL_SPACING, "2\\-2"),
        ("PixelSpacing_NaN", PIXEL_SPACING, "NaN\\2"), ("PixelSpacing_Inf", PIXEL_SPACING, "2\\Inf"),
        ("PixelSpacing_one_value", PIXEL_SPACING, "2"),
        ("ImagePositionPatient_NaN", IPP, "-11\\NaN\\-7"), ("ImagePositionPatient_Inf", IPP, "-Inf\\-11\\-7"),
        ("ImagePositionPatient_two_values", IPP, "-11\\-11"),
        ("ImageOrientationPatient_oblique", IOP, "0.8660254\\0.5\\0\\-0.5\\0.8660254\\0"),
        ("ImageOrientationPatient_not_orthogonal", IOP, "1\\0\\0\\0.6\\0.8\\0"),
        ("ImageOrientationPatient_parallel", IOP, "1\\0\\0\\1\\0\\0"),
        ("ImageOrientationPatient_not_unit", IOP, "2\\0\\0\\0\\1\\0"),
        ("ImageOrientationPatient_NaN", IOP, "1\\0\\0\\0\\NaN\\0"),
        ("GridFrameOffsetVector_not_monotonic", GFOV, "0\\2\\4\\6\\10\\8\\12\\14"),
        ("GridFrameOffsetVector_repeated", GFOV, "0\\2\\4\\6\\6\\10\\12\\14"),
        ("GridFrameOffsetVector_wrong_count", GFOV, "0\\2\\4\\6\\8\\10\\12"),
        ("GridFrameOffsetVector_NaN", GFOV, "0\\2\\4\\NaN\\8\\10\\12\\14"),
        ("NumberOfFrames_too_few", FRAMES, "7"),
    ]:
        put(name + ".dcm", set_text(ref, tag, v))
    put("Rows_too_many.dcm", set_us(ref, ROWS, 13))
    put("Columns_too_few.dcm", set_us(ref, COLUMNS, 11))
    put("Rows_zero.dcm", set_us(ref, ROWS, 0))

    # Dose values and units (PS3.3 C.8.8.3, C.8.8.3.4).
    for name, tag, v in [
        ("DoseGridScaling_NaN", SCALING, "NaN"), ("DoseGridScaling_Inf", SCALING, "Inf"), ("DoseGridScaling_zero", SCALING, "0"),
        ("DoseGridScaling_negative", SCALING, "-3.1e-05"), ("DoseGridScaling_empty", SCALING, ""),
        ("DoseGridScaling_not_a_number", SCALING, "0,001"), ("dose_overflows", SCALING, "1e300"), ("DoseUnits_CGY", DOSE_UNITS, "CGY"),
    ]:
        put(name + ".dcm", set_text(ref, tag, v))
    put("DoseGridScaling_missing.dcm", drop(ref, SCALING))
    put("DoseUnits_missing.dcm", drop(ref, DOSE_UNITS))
    # A signed dose holding −0.5 Gy at voxel (3, 4, 5), written legally as
    # DoseType ERROR, then relabelled PHYSICAL or left without a type.
    tmp = os.path.join(d, ".signed.dcm")
    v = flat(UNIFORM_REF["dims"], 2)
    v[5, 4, 3] = -0.5
    rtdose(tmp, case, "signed", v, UNIFORM_REF["ipp"], (2, 2), offsets(8, 0, 2), dose_type="ERROR")
    signed = open(tmp, "rb").read()
    os.remove(tmp)
    put("negative_PHYSICAL_dose.dcm", set_text(signed, DOSE_TYPE, "PHYSICAL"))
    put("negative_dose_no_DoseType.dcm", drop(signed, DOSE_TYPE))
    put("RELATIVE_evaluated.dcm", set_text(ev, DOSE_UNITS, "RELATIVE"))

    # What the values mean (PS3.3 C.8.8.3; the RT Dose IOD, A.18.3, has no
    # Modality LUT: DoseGridScaling alone scales).
    put("DoseType_EFFECTIVE_evaluated.dcm", set_text(ev, DOSE_TYPE, "EFFECTIVE"))
    put("DoseType_EFFECTIVE_reference.dcm", set_text(ref, DOSE_TYPE, "EFFECTIVE"))
    put("DoseType_ERROR_other_system.dcm", set_text(set_text(ev, DOSE_TYPE, "ERROR"), MANUFACTURER, "Other System"))
    put("DoseType_missing.dcm", drop(ref, DOSE_TYPE))
    put("RELATIVE_reference.dcm", set_text(ref, DOSE_UNITS, "RELATIVE"))
    put("RescaleSlope_2.dcm", insert(ref, RESCALE_SLOPE, "DS", "2"))
    put("RescaleIntercept_0.5.dcm", insert(ev, RESCALE_INTERCEPT, "DS", "0.5"))
    scaling = ref[find(ref, SCALING)[5]:][:find(ref, SCALING)[6]].decode("ascii").strip(" \0")
    put("RescaleSlope_equals_DoseGridScaling.dcm", insert(insert(ref, RESCALE_SLOPE, "DS", scaling), RESCALE_INTERCEPT, "DS", "0"))
    put("RescaleSlope_identity.dcm", insert(ref, RESCALE_SLOPE, "DS", "1"))
    rtdose(os.path.join(d, "evaluated_in_other_frame.dcm"), case, "evaluated-other-frame", flat(UNIFORM_EVAL["dims"], 2.04),
           UNIFORM_EVAL["ipp"], (2, 2), offsets(18, 0, 2), frame=uid(case + "/other-frame"))
    rtdose(os.path.join(d, "different_RT_Plan_evaluated.dcm"), case, "evaluated-other-plan", flat(UNIFORM_EVAL["dims"], 2.04),
           UNIFORM_EVAL["ipp"], (2, 2), offsets(18, 0, 2), plan=uid(case + "/other-plan"))

    # Structure sets (PS3.3 C.8.8.5, C.8.8.6). Contour 2 of PTV_1 is its
    # plane z = −1 mm; values are x, y, z triplets.
    put("NaN_coordinate.dcm", contour_value(rs, 1, 3 * 2 + 0, "NaN"))          # contour 2, point 3, x
    put("Inf_coordinate.dcm", contour_value(rs, 0, 1, "-Inf"))                 # contour 1, point 1, y
    put("coordinate_not_a_number.dcm", contour_value(rs, 0, 1, "4,56789"))
    put("ContourData_not_triplets.dcm", contour_value(rs, 0, 1, "1\\2\\3"))    # two values more
    put("NumberOfContourPoints_disagrees.dcm", contour_value(rs, 0, 1, "1\\2\\3\\4"))  # one point more
    # The first ReferencedROINumber is the ROIContourSequence item's (tags
    # ascend: (3006,0039) before (3006,0080)); the second the observation's.
    put("ROI_referenced_not_defined.dcm", set_text(rs, REF_ROI_NUMBER, "7", 0))
    put("observation_of_undefined_ROI.dcm", set_text(rs, REF_ROI_NUMBER, "7", 1))
    eye = {"number": 2, "name": "Eye_L", "type": "ORGAN", "contours": sphere_contours((6, 6, 0), 3, [-1, 1], 32)}
    tmp = os.path.join(d, ".two.dcm")
    rtstruct(tmp, case, "two-rois", uniform_structures([eye]))
    two = open(tmp, "rb").read()
    os.remove(tmp)
    put("ROI_number_defined_twice.dcm", set_text(two, ROI_NUMBER, "1", 1))
    other = uid(case + "/other-frame")
    rtstruct(os.path.join(d, "structure_set_in_other_frame.dcm"), case, "other-frame",
             uniform_structures(), frame=other)
    rtstruct(os.path.join(d, "ROI_in_other_frame.dcm"), case, "roi-other-frame", uniform_structures([dict(eye, frame=other)]))
    # Contours the rasteriser skips (roi/doc.go): an ROI of only one such
    # contour, and a target that keeps its others.
    for name, contour in [
        ("only_contour_has_2_points", [(-3, -3, 1), (3, 3, 1)]),
        ("only_contour_not_planar", [(-4, -4, -1), (4, -4, 1), (4, 4, 3), (-4, 4, 1)]),
    ]:
        cord = {"number": 2, "name": "Cord", "type": "ORGAN", "contours": [("CLOSED_PLANAR", contour)]}
        rtstruct(os.path.join(d, name + ".dcm"), case, name, uniform_structures([cord]))
    for name, contour in [
        ("target_contour_has_2_points", [(-3, -3, 5), (3, 3, 5)]),
        ("target_contour_not_planar", [(-3, -3, 5), (3, -3, 5), (3, 3, 7), (-3, 3, 5)]),
    ]:
        rois = uniform_structures()
        rois[0]["contours"] = rois[0]["contours"] + [("CLOSED_PLANAR", contour)]
        rtstruct(os.path.join(d, name + ".dcm"), case, name, rois)

    # The same contour twice on every plane (Cord), and a target drawn as
    # two boxes overlapping on x in [−2, 2] mm (PTV_2), each beside the ROI
    # drawn once: a sphere of radius 5 mm; the box [−6, 6] × [−4, 4] ×
    # [−5, 5] mm on the planes z = −5, −3, ..., 5.
    def box(x0, x1, y0, y1):
        return [("CLOSED_PLANAR", [(x0, y0, z), (x1, y0, z), (x1, y1, z), (x0, y1, z)]) for z in (-5, -3, -1, 1, 3, 5)]
    sphere = sphere_contours((0, 0, 0), 5, [-3, -1, 1, 3], 32)
    rtstruct(os.path.join(d, "contours_twice_and_overlapping.dcm"), case, "contours-twice", [
        {"number": 2, "name": "Cord", "type": "ORGAN", "contours": sphere + sphere},
        {"number": 3, "name": "Cord_single", "type": "ORGAN", "contours": sphere},
        {"number": 4, "name": "PTV_2", "type": "PTV", "contours": box(-6, 2, -4, 4) + box(-2, 6, -4, 4)},
        {"number": 5, "name": "PTV_2_single", "type": "PTV", "contours": box(-6, 6, -4, 4)},
    ])

    # Nothing to compare; identifiers missing.
    rtdose(os.path.join(d, "evaluated_grid_elsewhere.dcm"), case, "far", flat(UNIFORM_EVAL["dims"], 2.04), (179, -21, -17), (2, 2),
           offsets(18, 0, 2))
    rtdose(os.path.join(d, "evaluated_grid_partly_outside.dcm"), case, "half", flat((12, 22, 18), 2.04), (-21, -21, -17), (2, 2),
           offsets(18, 0, 2))
    rtdose(os.path.join(d, "all_zero_reference.dcm"), case, "zero", flat(UNIFORM_REF["dims"], 0), UNIFORM_REF["ipp"], (2, 2),
           offsets(8, 0, 2))
    put("no_StudyInstanceUID_no_FrameOfReferenceUID.dcm", drop(drop(ref, STUDY_UID), FRAME_UID))


def main():
    out = sys.argv[1] if len(sys.argv) > 1 else os.path.dirname(os.path.abspath(__file__))
    uniform(out)
    gradient(out)
    plans(out)
    bad_input(out)


if __name__ == "__main__":
    main()
