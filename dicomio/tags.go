package dicomio

import (
	"fmt"

	"github.com/suyashkumar/dicom/pkg/tag"
)

// Tags read or written by this package, with the keyword used in messages.
// They are spelled out here (rather than taken from the library's dictionary
// by name) so that every message can name the tag exactly as PS3.6 does.
var (
	tagFileMetaGroupLength       = tag.Tag{Group: 0x0002, Element: 0x0000}
	tagFileMetaVersion           = tag.Tag{Group: 0x0002, Element: 0x0001}
	tagMediaStorageSOPClass      = tag.Tag{Group: 0x0002, Element: 0x0002}
	tagMediaStorageSOPInstance   = tag.Tag{Group: 0x0002, Element: 0x0003}
	tagTransferSyntaxUID         = tag.Tag{Group: 0x0002, Element: 0x0010}
	tagImplementationClassUID    = tag.Tag{Group: 0x0002, Element: 0x0012}
	tagImplementationVersion     = tag.Tag{Group: 0x0002, Element: 0x0013}
	tagSpecificCharacterSet      = tag.Tag{Group: 0x0008, Element: 0x0005}
	tagInstanceCreationDate      = tag.Tag{Group: 0x0008, Element: 0x0012}
	tagInstanceCreationTime      = tag.Tag{Group: 0x0008, Element: 0x0013}
	tagSOPClassUID               = tag.Tag{Group: 0x0008, Element: 0x0016}
	tagSOPInstanceUID            = tag.Tag{Group: 0x0008, Element: 0x0018}
	tagStudyDate                 = tag.Tag{Group: 0x0008, Element: 0x0020}
	tagContentDate               = tag.Tag{Group: 0x0008, Element: 0x0023}
	tagStudyTime                 = tag.Tag{Group: 0x0008, Element: 0x0030}
	tagContentTime               = tag.Tag{Group: 0x0008, Element: 0x0033}
	tagAccessionNumber           = tag.Tag{Group: 0x0008, Element: 0x0050}
	tagModality                  = tag.Tag{Group: 0x0008, Element: 0x0060}
	tagManufacturer              = tag.Tag{Group: 0x0008, Element: 0x0070}
	tagReferringPhysicianName    = tag.Tag{Group: 0x0008, Element: 0x0090}
	tagSeriesDescription         = tag.Tag{Group: 0x0008, Element: 0x103E}
	tagOperatorsName             = tag.Tag{Group: 0x0008, Element: 0x1070}
	tagManufacturerModelName     = tag.Tag{Group: 0x0008, Element: 0x1090}
	tagReferencedSOPClassUID     = tag.Tag{Group: 0x0008, Element: 0x1150}
	tagReferencedSOPInstanceUID  = tag.Tag{Group: 0x0008, Element: 0x1155}
	tagPatientName               = tag.Tag{Group: 0x0010, Element: 0x0010}
	tagPatientID                 = tag.Tag{Group: 0x0010, Element: 0x0020}
	tagPatientBirthDate          = tag.Tag{Group: 0x0010, Element: 0x0030}
	tagPatientSex                = tag.Tag{Group: 0x0010, Element: 0x0040}
	tagPatientIdentityRemoved    = tag.Tag{Group: 0x0012, Element: 0x0062}
	tagDeidentificationMethod    = tag.Tag{Group: 0x0012, Element: 0x0063}
	tagSliceThickness            = tag.Tag{Group: 0x0018, Element: 0x0050}
	tagSoftwareVersions          = tag.Tag{Group: 0x0018, Element: 0x1020}
	tagStudyInstanceUID          = tag.Tag{Group: 0x0020, Element: 0x000D}
	tagSeriesInstanceUID         = tag.Tag{Group: 0x0020, Element: 0x000E}
	tagStudyID                   = tag.Tag{Group: 0x0020, Element: 0x0010}
	tagSeriesNumber              = tag.Tag{Group: 0x0020, Element: 0x0011}
	tagInstanceNumber            = tag.Tag{Group: 0x0020, Element: 0x0013}
	tagImagePositionPatient      = tag.Tag{Group: 0x0020, Element: 0x0032}
	tagImageOrientationPatient   = tag.Tag{Group: 0x0020, Element: 0x0037}
	tagFrameOfReferenceUID       = tag.Tag{Group: 0x0020, Element: 0x0052}
	tagPositionReferenceInd      = tag.Tag{Group: 0x0020, Element: 0x1040}
	tagSamplesPerPixel           = tag.Tag{Group: 0x0028, Element: 0x0002}
	tagPhotometric               = tag.Tag{Group: 0x0028, Element: 0x0004}
	tagNumberOfFrames            = tag.Tag{Group: 0x0028, Element: 0x0008}
	tagFrameIncrementPointer     = tag.Tag{Group: 0x0028, Element: 0x0009}
	tagRows                      = tag.Tag{Group: 0x0028, Element: 0x0010}
	tagColumns                   = tag.Tag{Group: 0x0028, Element: 0x0011}
	tagPixelSpacing              = tag.Tag{Group: 0x0028, Element: 0x0030}
	tagBitsAllocated             = tag.Tag{Group: 0x0028, Element: 0x0100}
	tagBitsStored                = tag.Tag{Group: 0x0028, Element: 0x0101}
	tagHighBit                   = tag.Tag{Group: 0x0028, Element: 0x0102}
	tagPixelRepresentation       = tag.Tag{Group: 0x0028, Element: 0x0103}
	tagRescaleIntercept          = tag.Tag{Group: 0x0028, Element: 0x1052}
	tagRescaleSlope              = tag.Tag{Group: 0x0028, Element: 0x1053}
	tagRescaleType               = tag.Tag{Group: 0x0028, Element: 0x1054}
	tagModalityLUTSequence       = tag.Tag{Group: 0x0028, Element: 0x3000}
	tagRWVMSequence              = tag.Tag{Group: 0x0040, Element: 0x9096}
	tagRWVIntercept              = tag.Tag{Group: 0x0040, Element: 0x9224}
	tagRWVSlope                  = tag.Tag{Group: 0x0040, Element: 0x9225}
	tagDoseUnits                 = tag.Tag{Group: 0x3004, Element: 0x0002}
	tagDoseType                  = tag.Tag{Group: 0x3004, Element: 0x0004}
	tagDoseComment               = tag.Tag{Group: 0x3004, Element: 0x0006}
	tagDoseSummationType         = tag.Tag{Group: 0x3004, Element: 0x000A}
	tagGridFrameOffsetVector     = tag.Tag{Group: 0x3004, Element: 0x000C}
	tagDoseGridScaling           = tag.Tag{Group: 0x3004, Element: 0x000E}
	tagStructureSetLabel         = tag.Tag{Group: 0x3006, Element: 0x0002}
	tagStructureSetName          = tag.Tag{Group: 0x3006, Element: 0x0004}
	tagStructureSetDate          = tag.Tag{Group: 0x3006, Element: 0x0008}
	tagStructureSetTime          = tag.Tag{Group: 0x3006, Element: 0x0009}
	tagReferencedFrameOfRefSeq   = tag.Tag{Group: 0x3006, Element: 0x0010}
	tagStructureSetROISequence   = tag.Tag{Group: 0x3006, Element: 0x0020}
	tagROINumber                 = tag.Tag{Group: 0x3006, Element: 0x0022}
	tagReferencedFrameOfRefUID   = tag.Tag{Group: 0x3006, Element: 0x0024}
	tagROIName                   = tag.Tag{Group: 0x3006, Element: 0x0026}
	tagROIDisplayColor           = tag.Tag{Group: 0x3006, Element: 0x002A}
	tagROIGenerationAlgorithm    = tag.Tag{Group: 0x3006, Element: 0x0036}
	tagROIContourSequence        = tag.Tag{Group: 0x3006, Element: 0x0039}
	tagContourSequence           = tag.Tag{Group: 0x3006, Element: 0x0040}
	tagContourGeometricType      = tag.Tag{Group: 0x3006, Element: 0x0042}
	tagNumberOfContourPoints     = tag.Tag{Group: 0x3006, Element: 0x0046}
	tagContourNumber             = tag.Tag{Group: 0x3006, Element: 0x0048}
	tagContourData               = tag.Tag{Group: 0x3006, Element: 0x0050}
	tagRTROIObservationsSeq      = tag.Tag{Group: 0x3006, Element: 0x0080}
	tagObservationNumber         = tag.Tag{Group: 0x3006, Element: 0x0082}
	tagReferencedROINumber       = tag.Tag{Group: 0x3006, Element: 0x0084}
	tagRTROIInterpretedType      = tag.Tag{Group: 0x3006, Element: 0x00A4}
	tagROIInterpreter            = tag.Tag{Group: 0x3006, Element: 0x00A6}
	tagReferencedRTPlanSequence  = tag.Tag{Group: 0x300C, Element: 0x0002}
	tagRTPlanLabel               = tag.Tag{Group: 0x300A, Element: 0x0002}
	tagRTPlanName                = tag.Tag{Group: 0x300A, Element: 0x0003}
	tagRTPlanDescription         = tag.Tag{Group: 0x300A, Element: 0x0004}
	tagRTPlanDate                = tag.Tag{Group: 0x300A, Element: 0x0006}
	tagRTPlanTime                = tag.Tag{Group: 0x300A, Element: 0x0007}
	tagPlanIntent                = tag.Tag{Group: 0x300A, Element: 0x000A}
	tagRTPlanGeometry            = tag.Tag{Group: 0x300A, Element: 0x000C}
	tagDoseReferenceSequence     = tag.Tag{Group: 0x300A, Element: 0x0010}
	tagDoseReferenceNumber       = tag.Tag{Group: 0x300A, Element: 0x0012}
	tagDoseReferenceUID          = tag.Tag{Group: 0x300A, Element: 0x0013}
	tagDoseReferenceStructType   = tag.Tag{Group: 0x300A, Element: 0x0014}
	tagDoseReferenceDescription  = tag.Tag{Group: 0x300A, Element: 0x0016}
	tagDoseReferenceType         = tag.Tag{Group: 0x300A, Element: 0x0020}
	tagDeliveryMaximumDose       = tag.Tag{Group: 0x300A, Element: 0x0023}
	tagTargetPrescriptionDose    = tag.Tag{Group: 0x300A, Element: 0x0026}
	tagFractionGroupSequence     = tag.Tag{Group: 0x300A, Element: 0x0070}
	tagFractionGroupNumber       = tag.Tag{Group: 0x300A, Element: 0x0071}
	tagFractionGroupDescription  = tag.Tag{Group: 0x300A, Element: 0x0072}
	tagNumberOfFractionsPlanned  = tag.Tag{Group: 0x300A, Element: 0x0078}
	tagNumberOfBeams             = tag.Tag{Group: 0x300A, Element: 0x0080}
	tagBeamDose                  = tag.Tag{Group: 0x300A, Element: 0x0084}
	tagBeamMeterset              = tag.Tag{Group: 0x300A, Element: 0x0086}
	tagNumberOfBrachySetups      = tag.Tag{Group: 0x300A, Element: 0x00A0}
	tagBeamSequence              = tag.Tag{Group: 0x300A, Element: 0x00B0}
	tagTreatmentMachineName      = tag.Tag{Group: 0x300A, Element: 0x00B2}
	tagPrimaryDosimeterUnit      = tag.Tag{Group: 0x300A, Element: 0x00B3}
	tagSourceAxisDistance        = tag.Tag{Group: 0x300A, Element: 0x00B4}
	tagBeamLimitingDeviceSeq     = tag.Tag{Group: 0x300A, Element: 0x00B6}
	tagRTBeamLimitingDeviceType  = tag.Tag{Group: 0x300A, Element: 0x00B8}
	tagNumberOfLeafJawPairs      = tag.Tag{Group: 0x300A, Element: 0x00BC}
	tagBeamNumber                = tag.Tag{Group: 0x300A, Element: 0x00C0}
	tagBeamName                  = tag.Tag{Group: 0x300A, Element: 0x00C2}
	tagBeamDescription           = tag.Tag{Group: 0x300A, Element: 0x00C3}
	tagBeamType                  = tag.Tag{Group: 0x300A, Element: 0x00C4}
	tagRadiationType             = tag.Tag{Group: 0x300A, Element: 0x00C6}
	tagTreatmentDeliveryType     = tag.Tag{Group: 0x300A, Element: 0x00CE}
	tagNumberOfWedges            = tag.Tag{Group: 0x300A, Element: 0x00D0}
	tagNumberOfCompensators      = tag.Tag{Group: 0x300A, Element: 0x00E0}
	tagNumberOfBoli              = tag.Tag{Group: 0x300A, Element: 0x00ED}
	tagNumberOfBlocks            = tag.Tag{Group: 0x300A, Element: 0x00F0}
	tagFinalCumulativeMSWeight   = tag.Tag{Group: 0x300A, Element: 0x010E}
	tagNumberOfControlPoints     = tag.Tag{Group: 0x300A, Element: 0x0110}
	tagControlPointSequence      = tag.Tag{Group: 0x300A, Element: 0x0111}
	tagControlPointIndex         = tag.Tag{Group: 0x300A, Element: 0x0112}
	tagNominalBeamEnergy         = tag.Tag{Group: 0x300A, Element: 0x0114}
	tagBeamLimitingDevicePosSeq  = tag.Tag{Group: 0x300A, Element: 0x011A}
	tagLeafJawPositions          = tag.Tag{Group: 0x300A, Element: 0x011C}
	tagGantryAngle               = tag.Tag{Group: 0x300A, Element: 0x011E}
	tagGantryRotationDirection   = tag.Tag{Group: 0x300A, Element: 0x011F}
	tagBeamLimitingDeviceAngle   = tag.Tag{Group: 0x300A, Element: 0x0120}
	tagBLDRotationDirection      = tag.Tag{Group: 0x300A, Element: 0x0121}
	tagPatientSupportAngle       = tag.Tag{Group: 0x300A, Element: 0x0122}
	tagPatientSupportRotDir      = tag.Tag{Group: 0x300A, Element: 0x0123}
	tagTableTopEccentricAngle    = tag.Tag{Group: 0x300A, Element: 0x0125}
	tagTableTopEccentricRotDir   = tag.Tag{Group: 0x300A, Element: 0x0126}
	tagIsocenterPosition         = tag.Tag{Group: 0x300A, Element: 0x012C}
	tagCumulativeMetersetWeight  = tag.Tag{Group: 0x300A, Element: 0x0134}
	tagPatientSetupSequence      = tag.Tag{Group: 0x300A, Element: 0x0180}
	tagPatientSetupNumber        = tag.Tag{Group: 0x300A, Element: 0x0182}
	tagIonBeamSequence           = tag.Tag{Group: 0x300A, Element: 0x03A2}
	tagIonControlPointSequence   = tag.Tag{Group: 0x300A, Element: 0x03A8}
	tagPatientPosition           = tag.Tag{Group: 0x0018, Element: 0x5100}
	tagReferencedPatientSetupNo  = tag.Tag{Group: 0x300C, Element: 0x006A}
	tagReferencedStructureSetSeq = tag.Tag{Group: 0x300C, Element: 0x0060}
	tagReferencedDoseRefSeq      = tag.Tag{Group: 0x300C, Element: 0x0050}
	tagReferencedDoseRefNumber   = tag.Tag{Group: 0x300C, Element: 0x0051}
	tagCumulativeDoseRefCoeff    = tag.Tag{Group: 0x300A, Element: 0x010C}
	tagSourceToSurfaceDistance   = tag.Tag{Group: 0x300A, Element: 0x0130}
	tagTableTopVerticalPosition  = tag.Tag{Group: 0x300A, Element: 0x0128}
	tagTableTopLongitudinalPos   = tag.Tag{Group: 0x300A, Element: 0x0129}
	tagTableTopLateralPosition   = tag.Tag{Group: 0x300A, Element: 0x012A}
	tagReferencedBeamSequence    = tag.Tag{Group: 0x300C, Element: 0x0004}
	tagReferencedBeamNumber      = tag.Tag{Group: 0x300C, Element: 0x0006}
	tagReferencedFractionGroupS  = tag.Tag{Group: 0x300C, Element: 0x0020}
	tagReferencedFractionGroupN  = tag.Tag{Group: 0x300C, Element: 0x0022}
	tagApprovalStatus            = tag.Tag{Group: 0x300E, Element: 0x0002}
	tagPixelData                 = tag.Tag{Group: 0x7FE0, Element: 0x0010}
	tagItem                      = tag.Tag{Group: 0xFFFE, Element: 0xE000}
	tagItemDelimitation          = tag.Tag{Group: 0xFFFE, Element: 0xE00D}
	tagSequenceDelimitation      = tag.Tag{Group: 0xFFFE, Element: 0xE0DD}
)

// tagNames gives the PS3.6 keyword of the tags that appear in messages.
var tagNames = map[tag.Tag]string{
	tagFileMetaGroupLength:      "FileMetaInformationGroupLength",
	tagTransferSyntaxUID:        "TransferSyntaxUID",
	tagSOPClassUID:              "SOPClassUID",
	tagSOPInstanceUID:           "SOPInstanceUID",
	tagModality:                 "Modality",
	tagPatientName:              "PatientName",
	tagPatientID:                "PatientID",
	tagStudyInstanceUID:         "StudyInstanceUID",
	tagSeriesInstanceUID:        "SeriesInstanceUID",
	tagImagePositionPatient:     "ImagePositionPatient",
	tagImageOrientationPatient:  "ImageOrientationPatient",
	tagFrameOfReferenceUID:      "FrameOfReferenceUID",
	tagSamplesPerPixel:          "SamplesPerPixel",
	tagPhotometric:              "PhotometricInterpretation",
	tagNumberOfFrames:           "NumberOfFrames",
	tagRows:                     "Rows",
	tagColumns:                  "Columns",
	tagPixelSpacing:             "PixelSpacing",
	tagBitsAllocated:            "BitsAllocated",
	tagBitsStored:               "BitsStored",
	tagHighBit:                  "HighBit",
	tagPixelRepresentation:      "PixelRepresentation",
	tagRescaleIntercept:         "RescaleIntercept",
	tagRescaleSlope:             "RescaleSlope",
	tagRescaleType:              "RescaleType",
	tagModalityLUTSequence:      "ModalityLUTSequence",
	tagRWVMSequence:             "RealWorldValueMappingSequence",
	tagRWVIntercept:             "RealWorldValueIntercept",
	tagRWVSlope:                 "RealWorldValueSlope",
	tagDoseUnits:                "DoseUnits",
	tagDoseType:                 "DoseType",
	tagDoseSummationType:        "DoseSummationType",
	tagGridFrameOffsetVector:    "GridFrameOffsetVector",
	tagDoseGridScaling:          "DoseGridScaling",
	tagReferencedFrameOfRefSeq:  "ReferencedFrameOfReferenceSequence",
	tagStructureSetROISequence:  "StructureSetROISequence",
	tagROINumber:                "ROINumber",
	tagReferencedFrameOfRefUID:  "ReferencedFrameOfReferenceUID",
	tagROIName:                  "ROIName",
	tagROIDisplayColor:          "ROIDisplayColor",
	tagROIContourSequence:       "ROIContourSequence",
	tagContourSequence:          "ContourSequence",
	tagContourGeometricType:     "ContourGeometricType",
	tagNumberOfContourPoints:    "NumberOfContourPoints",
	tagContourNumber:            "ContourNumber",
	tagContourData:              "ContourData",
	tagRTROIObservationsSeq:     "RTROIObservationsSequence",
	tagReferencedROINumber:      "ReferencedROINumber",
	tagRTROIInterpretedType:     "RTROIInterpretedType",
	tagReferencedRTPlanSequence: "ReferencedRTPlanSequence",
	tagRTPlanLabel:              "RTPlanLabel",
	tagRTPlanName:               "RTPlanName",
	tagRTPlanGeometry:           "RTPlanGeometry",
	tagDoseReferenceSequence:    "DoseReferenceSequence",
	tagDoseReferenceNumber:      "DoseReferenceNumber",
	tagDoseReferenceType:        "DoseReferenceType",
	tagDeliveryMaximumDose:      "DeliveryMaximumDose",
	tagTargetPrescriptionDose:   "TargetPrescriptionDose",
	tagFractionGroupSequence:    "FractionGroupSequence",
	tagFractionGroupNumber:      "FractionGroupNumber",
	tagNumberOfFractionsPlanned: "NumberOfFractionsPlanned",
	tagNumberOfBeams:            "NumberOfBeams",
	tagNumberOfBrachySetups:     "NumberOfBrachyApplicationSetups",
	tagBeamDose:                 "BeamDose",
	tagBeamMeterset:             "BeamMeterset",
	tagBeamSequence:             "BeamSequence",
	tagIonBeamSequence:          "IonBeamSequence",
	tagBeamNumber:               "BeamNumber",
	tagBeamName:                 "BeamName",
	tagNumberOfControlPoints:    "NumberOfControlPoints",
	tagControlPointSequence:     "ControlPointSequence",
	tagIonControlPointSequence:  "IonControlPointSequence",
	tagFinalCumulativeMSWeight:  "FinalCumulativeMetersetWeight",
	tagNominalBeamEnergy:        "NominalBeamEnergy",
	tagGantryAngle:              "GantryAngle",
	tagIsocenterPosition:        "IsocenterPosition",
	tagReferencedBeamSequence:   "ReferencedBeamSequence",
	tagReferencedBeamNumber:     "ReferencedBeamNumber",
	tagPixelData:                "PixelData",
	tagItem:                     "Item",
	tagItemDelimitation:         "ItemDelimitationItem",
	tagSequenceDelimitation:     "SequenceDelimitationItem",
}

// tagString names a tag for messages: "PixelSpacing (0028,0030)", or just
// the numbers for tags without a name here.
func tagString(t tag.Tag) string {
	if n, ok := tagNames[t]; ok {
		return fmt.Sprintf("%s (%04X,%04X)", n, t.Group, t.Element)
	}
	return fmt.Sprintf("(%04X,%04X)", t.Group, t.Element)
}
