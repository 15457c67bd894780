//! DICOM copies of demo phantoms: Secondary Capture files with invented patient data under a UID
//! root that is clearly a demo's, so that DICOM input can be shown and tested on the demo world.

use std::path::Path;

use anyhow::{Result, anyhow, bail};
use dicom_core::value::PrimitiveValue;
use dicom_core::{DataElement, VR};
use dicom_dictionary_std::{tags, uids};
use dicom_object::{FileMetaTableBuilder, InMemDicomObject};
use ndarray::Array2;

use super::Site;

/// The demo UID root: "2.25." and the integer of the version-5 UUID of
/// "urn:spurion:demo:brackenridge-imaging-cooperative" in the URL namespace (RFC 4122; the
/// 2.25 form is PS3.5 B.2). tests/reference/pydicom_lut.py derives it again.
pub const DEMO_UID_ROOT: &str = "2.25.136042043654373444407896329617875811145";

/// What a demo file says besides its pixels. Everything identifying is invented from `number`.
#[derive(Debug, Clone, PartialEq)]
pub struct DemoDicomMeta {
    /// The phantom's number: DEMO^PHANTOM-0005, BIC-0005.
    pub number: u32,
    /// Distinguishes files of one phantom (the SOP Instance UID ends in it).
    pub instance: u32,
    pub site: Site,
    /// Modality (0008,0060), e.g. "DX", "CR", "OT".
    pub modality: String,
    pub rescale_slope: f64,
    pub rescale_intercept: f64,
    pub window_center: f64,
    pub window_width: f64,
    pub burned_in_annotation: bool,
}

impl DemoDicomMeta {
    pub fn patient_name(&self) -> String {
        format!("DEMO^PHANTOM-{:04}", self.number)
    }
    pub fn patient_id(&self) -> String {
        format!("BIC-{:04}", self.number)
    }
    /// Study, series and SOP instance UIDs under the demo root.
    pub fn uids(&self) -> [String; 3] {
        [
            format!("{DEMO_UID_ROOT}.1.{}", self.number),
            format!("{DEMO_UID_ROOT}.2.{}", self.number),
            format!("{DEMO_UID_ROOT}.3.{}.{}", self.number, self.instance),
        ]
    }
}

/// A DICOM copy of phantom `number`: 12 bits stored at 16 × its 8-bit grey values, Modality DX,
/// Rescale Slope 1 and Intercept 0, and one window (centre 2040.5, width 4081) that the LINEAR
/// function of PS3.3 C.11.2.1.2.1 maps exactly back onto v / 255, so a reading of the copy is
/// the reading of the PNG. Burned In Annotation is YES where the phantom carries Hillmoor's tag.
pub fn write_demo_copy(path: &Path, phantom: &super::Phantom, number: u32) -> Result<()> {
    let gray = phantom.image.mapv(|v| u16::from(v) * 16);
    let meta = DemoDicomMeta {
        number,
        instance: 1,
        site: phantom.row.site,
        modality: "DX".into(),
        rescale_slope: 1.0,
        rescale_intercept: 0.0,
        window_center: 2040.5,
        window_width: 4081.0,
        burned_in_annotation: phantom.row.tag,
    };
    write_demo_dicom(path, &gray, 12, &meta)
}

/// Writes a Secondary Capture image (PS3.3 A.8.1), explicit VR little endian, MONOCHROME2,
/// unsigned, with `bits` bits stored (1 to 16; 8 bits allocated up to 8, else 16).
pub fn write_demo_dicom(path: &Path, gray: &Array2<u16>, bits: u8, meta: &DemoDicomMeta) -> Result<()> {
    if !(1..=16).contains(&bits) {
        bail!("cannot write {}: {bits} bits stored asked for; a demo file takes 1 to 16.", path.display());
    }
    let (rows, columns) = gray.dim();
    if rows == 0 || columns == 0 || rows > 65535 || columns > 65535 {
        bail!("cannot write {}: the image is {rows} × {columns}; DICOM takes 1 to 65535 each way.", path.display());
    }
    if let Some(((r, c), v)) = gray.indexed_iter().find(|(_, v)| u32::from(**v) >> bits != 0) {
        bail!("cannot write {}: pixel ({r}, {c}) is {v}, which does not fit in {bits} bits. Scale the image or ask for more bits.", path.display());
    }
    let allocated: u16 = if bits <= 8 { 8 } else { 16 };
    let pixels = if allocated == 8 {
        DataElement::new(tags::PIXEL_DATA, VR::OB, PrimitiveValue::U8(gray.iter().map(|&v| v as u8).collect()))
    } else {
        DataElement::new(tags::PIXEL_DATA, VR::OW, PrimitiveValue::U16(gray.iter().copied().collect()))
    };
    let [study, series, instance] = meta.uids();
    let ds = |v: f64| format_ds(v);
    let text = |tag, vr, v: &str| DataElement::new(tag, vr, PrimitiveValue::from(v));
    let us = |tag, v: u16| DataElement::new(tag, VR::US, PrimitiveValue::from(v));
    let obj = InMemDicomObject::from_element_iter([
        text(tags::SOP_CLASS_UID, VR::UI, uids::SECONDARY_CAPTURE_IMAGE_STORAGE),
        text(tags::SOP_INSTANCE_UID, VR::UI, &instance),
        text(tags::STUDY_DATE, VR::DA, ""),
        text(tags::STUDY_TIME, VR::TM, ""),
        text(tags::ACCESSION_NUMBER, VR::SH, ""),
        text(tags::MODALITY, VR::CS, &meta.modality),
        // Type 2 in General Equipment (PS3.3 C.7.5.1): present, here naming the generator.
        text(tags::MANUFACTURER, VR::LO, "spurion demo phantom generator"),
        // Type 2C in General Series and General Image (PS3.3 C.7.3.1, C.7.6.1): present and
        // empty, as a phantom has no paired body part and no patient orientation to state.
        // dciodvfy (dicom3tools) reported both missing before.
        text(tags::LATERALITY, VR::CS, ""),
        text(tags::PATIENT_ORIENTATION, VR::CS, ""),
        // SYN: a synthetic image (PS3.3 C.8.6.1, Conversion Type).
        text(tags::CONVERSION_TYPE, VR::CS, "SYN"),
        text(tags::INSTITUTION_NAME, VR::LO, &format!("Brackenridge Imaging Cooperative {} (demo)", meta.site.name())),
        text(tags::REFERRING_PHYSICIAN_NAME, VR::PN, ""),
        text(tags::PATIENT_NAME, VR::PN, &meta.patient_name()),
        text(tags::PATIENT_ID, VR::LO, &meta.patient_id()),
        text(tags::PATIENT_BIRTH_DATE, VR::DA, ""),
        text(tags::PATIENT_SEX, VR::CS, "O"),
        text(tags::STUDY_INSTANCE_UID, VR::UI, &study),
        text(tags::SERIES_INSTANCE_UID, VR::UI, &series),
        text(tags::STUDY_ID, VR::SH, &format!("BIC-S{:04}", meta.number)),
        text(tags::SERIES_NUMBER, VR::IS, "1"),
        text(tags::INSTANCE_NUMBER, VR::IS, &meta.instance.to_string()),
        us(tags::SAMPLES_PER_PIXEL, 1),
        text(tags::PHOTOMETRIC_INTERPRETATION, VR::CS, "MONOCHROME2"),
        us(tags::ROWS, rows as u16),
        us(tags::COLUMNS, columns as u16),
        us(tags::BITS_ALLOCATED, allocated),
        us(tags::BITS_STORED, u16::from(bits)),
        us(tags::HIGH_BIT, u16::from(bits) - 1),
        us(tags::PIXEL_REPRESENTATION, 0),
        text(tags::BURNED_IN_ANNOTATION, VR::CS, if meta.burned_in_annotation { "YES" } else { "NO" }),
        text(tags::WINDOW_CENTER, VR::DS, &ds(meta.window_center)),
        text(tags::WINDOW_WIDTH, VR::DS, &ds(meta.window_width)),
        text(tags::RESCALE_INTERCEPT, VR::DS, &ds(meta.rescale_intercept)),
        text(tags::RESCALE_SLOPE, VR::DS, &ds(meta.rescale_slope)),
        text(tags::RESCALE_TYPE, VR::LO, "US"),
        pixels,
    ]);
    let file = obj
        .with_meta(FileMetaTableBuilder::new().transfer_syntax(uids::EXPLICIT_VR_LITTLE_ENDIAN))
        .map_err(|e| anyhow!("cannot write {}: the file meta group could not be made ({})", path.display(), e))?;
    file.write_to_file(path)
        .map_err(|e| anyhow!("cannot write {}: {}. Check that the folder exists and is writable.", path.display(), e))
}

/// A decimal string of at most 16 characters (PS3.5 6.2, DS).
fn format_ds(v: f64) -> String {
    let plain = format!("{v}");
    if plain.len() <= 16 { plain } else { format!("{v:.9e}") }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_files_say_they_are_a_demo_and_read_back() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("0005-hillmoor.dcm");
        let gray = Array2::from_shape_fn((8, 6), |(y, x)| (y * 6 + x) as u16 * 16);
        let meta = DemoDicomMeta {
            number: 5,
            instance: 1,
            site: Site::Hillmoor,
            modality: "DX".into(),
            rescale_slope: 1.0,
            rescale_intercept: 0.0,
            window_center: 2040.5,
            window_width: 4081.0,
            burned_in_annotation: true,
        };
        write_demo_dicom(&p, &gray, 12, &meta).unwrap();
        let img = crate::feed::dicom::read_dicom(&p, 0).unwrap();
        assert_eq!(img.burned_in_annotation, Some(true));
        assert_eq!(img.values[[1, 2, 0]], (8 * 16) as f32);
        let found: Vec<&str> = img.identifying().iter().map(|(k, _)| k.as_str()).collect();
        assert!(found.contains(&"PatientName") && found.contains(&"PatientID"), "{found:?}");
        assert!(img.identifying().iter().any(|(_, v)| v == "DEMO^PHANTOM-0005"));
        assert!(meta.uids().iter().all(|u| u.starts_with(DEMO_UID_ROOT)));
    }
}
