//! The patient-identifying attributes: which they are, and finding them in a file.

use super::*;

/// Patient-identifying attributes, after DICOM PS3.15 Annex E (Attribute Confidentiality
/// Profiles), Table E.1-1, Basic Application Level Confidentiality Profile: keyword and tag.
///
/// This is a SUBSET recalled from memory, not the complete table: the patient, study, visit,
/// staff, device and UID attributes most often found in image files. Keywords and tags are
/// checked against dicom-rs's standard dictionary (PS3.6) by a test; the selection is not.
/// Private attributes (which the profile also removes) are not listed.
pub const BASIC_PROFILE: &[(&str, Tag)] = &[
    // Patient
    ("PatientName", Tag(0x0010, 0x0010)),
    ("PatientID", Tag(0x0010, 0x0020)),
    ("IssuerOfPatientID", Tag(0x0010, 0x0021)),
    ("PatientBirthDate", Tag(0x0010, 0x0030)),
    ("PatientBirthTime", Tag(0x0010, 0x0032)),
    ("PatientSex", Tag(0x0010, 0x0040)),
    ("PatientInsurancePlanCodeSequence", Tag(0x0010, 0x0050)),
    ("OtherPatientIDs", Tag(0x0010, 0x1000)),
    ("OtherPatientNames", Tag(0x0010, 0x1001)),
    ("OtherPatientIDsSequence", Tag(0x0010, 0x1002)),
    ("PatientBirthName", Tag(0x0010, 0x1005)),
    ("PatientAge", Tag(0x0010, 0x1010)),
    ("PatientSize", Tag(0x0010, 0x1020)),
    ("PatientWeight", Tag(0x0010, 0x1030)),
    ("PatientAddress", Tag(0x0010, 0x1040)),
    ("PatientMotherBirthName", Tag(0x0010, 0x1060)),
    ("MilitaryRank", Tag(0x0010, 0x1080)),
    ("BranchOfService", Tag(0x0010, 0x1081)),
    ("MedicalRecordLocator", Tag(0x0010, 0x1090)),
    ("MedicalAlerts", Tag(0x0010, 0x2000)),
    ("Allergies", Tag(0x0010, 0x2110)),
    ("CountryOfResidence", Tag(0x0010, 0x2150)),
    ("RegionOfResidence", Tag(0x0010, 0x2152)),
    ("PatientTelephoneNumbers", Tag(0x0010, 0x2154)),
    ("EthnicGroup", Tag(0x0010, 0x2160)),
    ("Occupation", Tag(0x0010, 0x2180)),
    ("SmokingStatus", Tag(0x0010, 0x21A0)),
    ("AdditionalPatientHistory", Tag(0x0010, 0x21B0)),
    ("PregnancyStatus", Tag(0x0010, 0x21C0)),
    ("PatientReligiousPreference", Tag(0x0010, 0x21F0)),
    ("ResponsiblePerson", Tag(0x0010, 0x2297)),
    ("PatientComments", Tag(0x0010, 0x4000)),
    ("PatientState", Tag(0x0038, 0x0500)),
    // Visit and request
    ("AdmissionID", Tag(0x0038, 0x0010)),
    ("ServiceEpisodeID", Tag(0x0038, 0x0060)),
    ("SpecialNeeds", Tag(0x0038, 0x0050)),
    ("CurrentPatientLocation", Tag(0x0038, 0x0300)),
    ("VisitComments", Tag(0x0038, 0x4000)),
    ("AdmittingDiagnosesDescription", Tag(0x0008, 0x1080)),
    ("RequestingPhysician", Tag(0x0032, 0x1032)),
    ("RequestingService", Tag(0x0032, 0x1033)),
    ("RequestAttributesSequence", Tag(0x0040, 0x0275)),
    ("RequestedProcedureID", Tag(0x0040, 0x1001)),
    ("ScheduledProcedureStepID", Tag(0x0040, 0x0009)),
    ("PerformedProcedureStepID", Tag(0x0040, 0x0253)),
    ("PerformedProcedureStepStartDate", Tag(0x0040, 0x0244)),
    ("PerformedProcedureStepStartTime", Tag(0x0040, 0x0245)),
    ("PerformedProcedureStepDescription", Tag(0x0040, 0x0254)),
    // Study, series, instance: identifiers, dates and times, free text
    ("AccessionNumber", Tag(0x0008, 0x0050)),
    ("StudyID", Tag(0x0020, 0x0010)),
    ("StudyDate", Tag(0x0008, 0x0020)),
    ("SeriesDate", Tag(0x0008, 0x0021)),
    ("AcquisitionDate", Tag(0x0008, 0x0022)),
    ("ContentDate", Tag(0x0008, 0x0023)),
    ("AcquisitionDateTime", Tag(0x0008, 0x002A)),
    ("StudyTime", Tag(0x0008, 0x0030)),
    ("SeriesTime", Tag(0x0008, 0x0031)),
    ("AcquisitionTime", Tag(0x0008, 0x0032)),
    ("ContentTime", Tag(0x0008, 0x0033)),
    ("InstanceCreationDate", Tag(0x0008, 0x0012)),
    ("InstanceCreationTime", Tag(0x0008, 0x0013)),
    ("TimezoneOffsetFromUTC", Tag(0x0008, 0x0201)),
    ("StudyDescription", Tag(0x0008, 0x1030)),
    ("SeriesDescription", Tag(0x0008, 0x103E)),
    ("ProtocolName", Tag(0x0018, 0x1030)),
    ("StudyComments", Tag(0x0032, 0x4000)),
    ("ImageComments", Tag(0x0020, 0x4000)),
    ("DerivationDescription", Tag(0x0008, 0x2111)),
    ("AcquisitionComments", Tag(0x0018, 0x4000)),
    ("ContrastBolusAgent", Tag(0x0018, 0x0010)),
    // Institution and people
    ("InstitutionName", Tag(0x0008, 0x0080)),
    ("InstitutionAddress", Tag(0x0008, 0x0081)),
    ("InstitutionalDepartmentName", Tag(0x0008, 0x1040)),
    ("ReferringPhysicianName", Tag(0x0008, 0x0090)),
    ("ReferringPhysicianAddress", Tag(0x0008, 0x0092)),
    ("ReferringPhysicianTelephoneNumbers", Tag(0x0008, 0x0094)),
    ("ConsultingPhysicianName", Tag(0x0008, 0x009C)),
    ("PhysiciansOfRecord", Tag(0x0008, 0x1048)),
    ("PerformingPhysicianName", Tag(0x0008, 0x1050)),
    ("NameOfPhysiciansReadingStudy", Tag(0x0008, 0x1060)),
    ("OperatorsName", Tag(0x0008, 0x1070)),
    ("ContentCreatorName", Tag(0x0070, 0x0084)),
    ("VerifyingObserverName", Tag(0x0040, 0xA075)),
    ("PersonName", Tag(0x0040, 0xA123)),
    // Equipment
    ("StationName", Tag(0x0008, 0x1010)),
    ("DeviceSerialNumber", Tag(0x0018, 0x1000)),
    ("DeviceUID", Tag(0x0018, 0x1002)),
    ("GeneratorID", Tag(0x0018, 0x1005)),
    ("GantryID", Tag(0x0018, 0x1008)),
    ("DetectorID", Tag(0x0018, 0x700A)),
    ("DateOfLastCalibration", Tag(0x0018, 0x1200)),
    ("TimeOfLastCalibration", Tag(0x0018, 0x1201)),
    // UIDs and references to other instances
    ("InstanceCreatorUID", Tag(0x0008, 0x0014)),
    ("SOPInstanceUID", Tag(0x0008, 0x0018)),
    ("StudyInstanceUID", Tag(0x0020, 0x000D)),
    ("SeriesInstanceUID", Tag(0x0020, 0x000E)),
    ("FrameOfReferenceUID", Tag(0x0020, 0x0052)),
    ("SynchronizationFrameOfReferenceUID", Tag(0x0020, 0x0200)),
    ("IrradiationEventUID", Tag(0x0008, 0x3010)),
    ("TransactionUID", Tag(0x0008, 0x1195)),
    ("ReferencedSOPInstanceUID", Tag(0x0008, 0x1155)),
    ("ReferencedFrameOfReferenceUID", Tag(0x3006, 0x0024)),
    ("StorageMediaFileSetUID", Tag(0x0088, 0x0140)),
    ("UID", Tag(0x0040, 0xA124)),
    ("ReferencedPatientSequence", Tag(0x0008, 0x1120)),
    ("ReferencedStudySequence", Tag(0x0008, 0x1110)),
    ("ReferencedPerformedProcedureStepSequence", Tag(0x0008, 0x1111)),
    ("ReferencedImageSequence", Tag(0x0008, 0x1140)),
    ("SourceImageSequence", Tag(0x0008, 0x2112)),
    ("ModifiedAttributesSequence", Tag(0x0400, 0x0550)),
];
// Identifying attributes.

pub(super) fn identifying(obj: &InMemDicomObject) -> Vec<(String, String)> {
    let mut found = Vec::new();
    collect_identifying(obj, &mut found);
    found
}

pub(super) fn collect_identifying(obj: &InMemDicomObject, found: &mut Vec<(String, String)>) {
    for element in obj.iter() {
        let listed = BASIC_PROFILE.iter().find(|(_, tag)| *tag == element.header().tag).map(|(k, _)| *k);
        match element.value() {
            Value::Sequence(seq) => {
                if let Some(keyword) = listed {
                    found.push((keyword.to_string(), format!("(sequence of {} items)", seq.items().len())));
                }
                for item in seq.items() {
                    collect_identifying(item, found);
                }
            }
            Value::Primitive(_) => {
                // Only listed elements are turned into text: the pixel data never is.
                if let Some(keyword) = listed
                    && let Some(value) = element_text(element)
                {
                    found.push((keyword.to_string(), value));
                }
            }
            Value::PixelSequence(_) => {}
        }
    }
}

