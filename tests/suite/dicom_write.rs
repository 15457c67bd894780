//! Demo files: write_demo_dicom round-trips through read_dicom and through pydicom 3.0.2
//! (tests/reference/pydicom_lut.py readback); the demo UID root, the Basic Profile table
//! against the PS3.6 dictionary, is_dicom, and that reading leaves a file untouched.

use std::path::PathBuf;

use dicom_core::dictionary::{DataDictionary, DataDictionaryEntry};
use spurion::demo::Site;
use spurion::demo::dicom::{DEMO_UID_ROOT, DemoDicomMeta, write_demo_dicom};
use spurion::feed::dicom::{BASIC_PROFILE, is_dicom, read_dicom};
use ndarray::Array2;
use serde::Deserialize;

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("dicom-proto-write-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

fn meta(burned_in: bool) -> DemoDicomMeta {
    DemoDicomMeta {
        number: 5,
        instance: 2,
        site: Site::Saltmarsh,
        modality: "DX".into(),
        rescale_slope: 0.5,
        rescale_intercept: -100.0,
        window_center: 900.0,
        window_width: 1600.0,
        burned_in_annotation: burned_in,
    }
}

fn gradient(rows: usize, cols: usize, max: u16) -> Array2<u16> {
    Array2::from_shape_fn((rows, cols), |(r, c)| ((r * 131 + c * 17) % (usize::from(max) + 1)) as u16)
}

#[derive(Deserialize)]
struct Readback {
    transfer_syntax: String,
    sop_class: String,
    rows: usize,
    columns: usize,
    bits_allocated: u16,
    bits_stored: u16,
    patient_name: String,
    patient_id: String,
    modality: String,
    burned_in_annotation: String,
    rescale: [f64; 2],
    window: [f64; 2],
    uids: [String; 3],
    pixels: Vec<u32>,
    modality_values: Vec<f64>,
}

#[test]
fn demo_file_reads_back_in_pydicom_and_here() {
    let Some(_) = crate::common::reference_python() else { return };
    for (bits, burned_in) in [(12u8, true), (8, false), (16, true)] {
        let path = scratch(&format!("demo-{bits}.dcm"));
        let max = ((1u32 << bits) - 1) as u16;
        let gray = gradient(37, 52, max);
        write_demo_dicom(&path, &gray, bits, &meta(burned_in)).unwrap();

        // pydicom's reading: pydicom.dcmread, pixel_array, apply_modality_lut.
        let back: Readback = serde_json::from_str(&crate::dicom_common::run_script(&["readback", path.to_str().unwrap()])).unwrap();
        assert_eq!(back.transfer_syntax, "1.2.840.10008.1.2.1", "Explicit VR Little Endian (PS3.5 A.2)");
        assert_eq!(back.sop_class, "1.2.840.10008.5.1.4.1.1.7", "Secondary Capture Image Storage (PS3.4 B.5)");
        assert_eq!((back.rows, back.columns), (37, 52));
        assert_eq!((back.bits_allocated, back.bits_stored), (if bits <= 8 { 8 } else { 16 }, u16::from(bits)));
        assert_eq!(back.patient_name, "DEMO^PHANTOM-0005");
        assert_eq!(back.patient_id, "BIC-0005");
        assert_eq!(back.modality, "DX");
        assert_eq!(back.burned_in_annotation, if burned_in { "YES" } else { "NO" });
        assert_eq!(back.rescale, [0.5, -100.0]);
        assert_eq!(back.window, [900.0, 1600.0]);
        assert!(back.uids.iter().all(|u| u.starts_with(DEMO_UID_ROOT)), "{:?}", back.uids);
        let ours: Vec<u32> = gray.iter().map(|&v| u32::from(v)).collect();
        assert_eq!(back.pixels, ours, "pydicom's pixel_array is what was written");

        // read_dicom of the same file.
        let img = read_dicom(&path, 0).unwrap();
        assert_eq!(img.burned_in_annotation, Some(burned_in));
        assert_eq!(img.modality.as_deref(), Some("DX"));
        let values: Vec<f64> = img.values.iter().map(|&v| f64::from(v)).collect();
        assert_eq!(values, back.modality_values, "read_dicom's values are pydicom's apply_modality_lut");
        let id: Vec<(&str, &str)> = img.identifying().iter().map(|(k, v)| (k.as_str(), v.as_str())).collect();
        assert!(id.contains(&("PatientName", "DEMO^PHANTOM-0005")) && id.contains(&("PatientID", "BIC-0005")), "{id:?}");
        assert!(id.contains(&("InstitutionName", "Brackenridge Imaging Cooperative saltmarsh (demo)")), "{id:?}");
    }
}

#[test]
fn writer_refuses_what_does_not_fit() {
    let Some(_) = crate::common::reference_python() else { return };
    let path = scratch("refused.dcm");
    let err = write_demo_dicom(&path, &gradient(4, 4, 4095), 8, &meta(false)).unwrap_err().to_string();
    assert!(err.contains("refused.dcm") && err.contains("does not fit in 8 bits"), "{err}");
    let err = write_demo_dicom(&path, &gradient(4, 4, 255), 17, &meta(false)).unwrap_err().to_string();
    assert!(err.contains("17 bits"), "{err}");
    let err = write_demo_dicom(&path, &Array2::zeros((0, 4)), 8, &meta(false)).unwrap_err().to_string();
    assert!(err.contains("0 × 4"), "{err}");
    assert!(!path.exists(), "nothing is written when the input is refused");
}

// The root is "2.25." and the integer of uuid.uuid5(NAMESPACE_URL, name) (PS3.5 B.2; RFC 4122),
// derived again by Python's uuid module (reference.json, written by pydicom_lut.py).
#[test]
fn demo_uid_root_is_the_derived_uuid() {
    let Some(_) = crate::common::reference_python() else { return };
    let text = std::fs::read_to_string(crate::dicom_common::fixtures().join("reference.json")).unwrap();
    let json: serde_json::Value = serde_json::from_str(&text).unwrap();
    assert_eq!(json["demo_uid_root"].as_str(), Some(DEMO_UID_ROOT));
    // PS3.5 9.1: at most 64 characters, digits and dots, no leading zero in a component.
    for uid in meta(true).uids() {
        assert!(uid.len() <= 64, "{uid}");
        assert!(uid.split('.').all(|c| !c.is_empty() && c.bytes().all(|b| b.is_ascii_digit()) && (c == "0" || !c.starts_with('0'))), "{uid}");
    }
}

// Keywords and tags of the Basic Profile table agree with dicom-rs's standard dictionary
// (generated from DICOM PS3.6).
#[test]
fn basic_profile_keywords_match_the_dictionary() {
    let Some(_) = crate::common::reference_python() else { return };
    let dictionary = dicom_dictionary_std::StandardDataDictionary;
    for (keyword, tag) in BASIC_PROFILE {
        let entry = dictionary.by_tag(*tag).unwrap_or_else(|| panic!("{keyword}: {tag} is not in PS3.6"));
        assert_eq!(entry.alias(), *keyword, "tag {tag}");
    }
    let mut tags: Vec<_> = BASIC_PROFILE.iter().map(|(_, t)| *t).collect();
    tags.sort();
    tags.dedup();
    assert_eq!(tags.len(), BASIC_PROFILE.len(), "a tag is listed twice");
}

// PS3.10 7.1: preamble + "DICM"; pydicom's meta-less files (ExplVR_*NoMeta.dcm, which pydicom
// reads with force=True) and the derived meta-less fixtures start in group 0008.
#[test]
fn sniffing() {
    let Some(_) = crate::common::reference_python() else { return };
    for name in ["CT_small.dcm", "MR_small_bigendian.dcm", "ExplVR_BigEndNoMeta.dcm", "ExplVR_LitEndNoMeta.dcm", "rtstruct.dcm"] {
        let bytes = std::fs::read(crate::dicom_common::pydicom_files().join(name)).unwrap();
        assert!(is_dicom(&bytes[..132.min(bytes.len())]), "{name}");
    }
    for name in ["nometa_implicit_le.dcm", "nometa_explicit_le.dcm", "nometa_explicit_be.dcm"] {
        let bytes = std::fs::read(crate::dicom_common::fixtures().join("derived").join(name)).unwrap();
        assert!(is_dicom(&bytes), "{name}");
    }
    // The PNG signature (ISO/IEC 15948 5.2), text, nothing.
    assert!(!is_dicom(b"\x89PNG\r\n\x1a\n\0\0\0\rIHDR"));
    assert!(!is_dicom(b"Brackenridge Imaging Cooperative"));
    assert!(!is_dicom(b""));
}

#[test]
fn reading_leaves_the_file_untouched() {
    let Some(_) = crate::common::reference_python() else { return };
    let path = scratch("untouched.dcm");
    write_demo_dicom(&path, &gradient(16, 16, 255), 8, &meta(false)).unwrap();
    let before = (std::fs::read(&path).unwrap(), std::fs::metadata(&path).unwrap().modified().unwrap());
    read_dicom(&path, 0).unwrap();
    let after = (std::fs::read(&path).unwrap(), std::fs::metadata(&path).unwrap().modified().unwrap());
    assert!(before == after, "read_dicom changed the file or its modification time");
}
