//! Cleaning a DICOM file so that it stays a valid DICOM image (PS3.3), checked with dicom3tools'
//! dciodvfy in the tests:
//!
//! - the samples are painted out on the stored values of every frame (one set of regions for
//!   all frames: burned-in text sits still across a cine loop), with Bits Allocated, Bits
//!   Stored, High Bit, Pixel Representation, Modality, the Modality LUT and the VOI LUT module
//!   (windows, VOI LUT Sequence) kept as they were;
//! - it is a derived image: a new SOP Instance UID (2.25 form, PS3.5 B.2, from a hash of the
//!   original's UID, the settings and the new pixels, so the same cleaning gives the same UID),
//!   Image Type value 1 DERIVED (value 2 kept, SECONDARY when absent; PS3.3 C.7.6.1.1.2),
//!   Derivation Description, and the original in the Source Image Sequence (Referenced SOP
//!   Class and Instance UID; PS3.3 C.7.6.1);
//! - Burned In Annotation (0028,0301) says what remains: YES when the finders still find a
//!   burned-in mark outside what was painted, else NO (the finders are hints, not proof: the
//!   manifest keeps the value before and after);
//! - De-identification Method Code Sequence (0012,0064) gets the item (113101, DCM, "Clean Pixel
//!   Data Option"), the option of PS3.15 Annex E's Basic Application Level Confidentiality
//!   Profile for burned-in pixel data, coded in CID 7050 of PS3.16. The code was recalled from
//!   memory and checked against pydicom 3.0.2's code dictionary (`codes.DCM.CleanPixelDataOption`),
//!   which tests/suite/clean.rs does live. Patient Identity Removed is not set: cleaning the
//!   pixels does not remove the identifying attributes.
//! - Compressed input (JPEG, JPEG-LS, JPEG 2000, RLE, deflate) is written uncompressed, Explicit
//!   VR Little Endian; colour the decoder gave back as RGB is written RGB, YBR_FULL_422 as
//!   YBR_FULL, planar as interleaved; each such change is said in the manifest's note.
//!
//! No identifying value is read out of the file here: the object is carried over whole.

use anyhow::{Result, anyhow};
use dicom_core::value::{DataSetSequence, PrimitiveValue};
use dicom_core::{DataElement, Tag, VR};
use dicom_dictionary_std::{tags, uids};
use dicom_object::{FileMetaTableBuilder, InMemDicomObject};
use sha2::{Digest, Sha256};

use super::Cleaned;
use super::paint::paint;
use crate::feed::dicom::{StoredColour, StoredDicom};
use crate::regions::Region;

/// The De-identification Method code of the Clean Pixel Data Option (PS3.16 CID 7050; see the
/// module's notes on where the value was checked).
pub const CLEAN_PIXEL_DATA: (&str, &str, &str) = ("113101", "DCM", "Clean Pixel Data Option");

/// What the painted copy's Derivation Description says.
const DERIVATION: &str = "Burned-in marks painted out from their surroundings (spurion clean); see the cleaning manifest";

/// A 2.25 UID (PS3.5 B.2) from a SHA-256 of `parts`: its first 16 bytes as a UUID of version 8
/// (RFC 9562, custom; the version and variant bits set as that RFC says, from memory), written
/// as one decimal integer.
pub fn derived_uid(parts: &[&[u8]]) -> String {
    let mut h = Sha256::new();
    for p in parts {
        h.update((p.len() as u64).to_le_bytes());
        h.update(p);
    }
    let d = h.finalize();
    let mut b = [0u8; 16];
    b.copy_from_slice(&d[..16]);
    b[6] = (b[6] & 0x0f) | 0x80;
    b[8] = (b[8] & 0x3f) | 0x80;
    format!("2.25.{}", u128::from_be_bytes(b))
}

fn text_element(tag: Tag, vr: VR, v: &str) -> DataElement<InMemDicomObject> {
    DataElement::new(tag, vr, PrimitiveValue::from(v))
}

/// A file's stored frames with `regions` painted out, written again as a valid DICOM file.
/// `marks_remain`: whether the finders still find a burned-in mark outside the regions.
pub fn clean_dicom(mut s: StoredDicom, regions: &[Region], marks_remain: bool, settings_id: &str) -> Result<Cleaned> {
    let (h, w, c) = (s.rows, s.columns, s.samples_per_pixel);
    let limits = s.value_limits();
    let bps = usize::from(s.bits_allocated / 8);
    let stored_mask: u64 = if s.bits_stored >= 64 { u64::MAX } else { (1u64 << s.bits_stored) - 1 };
    let (mut painted, mut changed, mut fill) = (0, 0, String::new());
    for f in 0..s.frames.len() {
        let values = s.values(f);
        let p = paint(&values, h, w, c, regions, limits);
        let bytes = &mut s.frames[f];
        for &(i, v) in &p.changes {
            let at = &mut bytes[i * bps..(i + 1) * bps];
            let mut raw = [0u8; 8];
            raw[..bps].copy_from_slice(at);
            let old = u64::from_ne_bytes(raw);
            // The bits above Bits Stored are not the sample's: they keep what they held.
            let new = (old & !stored_mask) | (v as u64 & stored_mask);
            at.copy_from_slice(&new.to_ne_bytes()[..bps]);
        }
        painted += p.painted;
        changed += p.changed;
        fill = p.fill;
    }
    let mut notes = vec![];
    if s.was_encapsulated {
        notes.push(format!("written uncompressed (Explicit VR Little Endian) from {}", s.transfer_syntax_name));
    } else if s.transfer_syntax_uid != uids::EXPLICIT_VR_LITTLE_ENDIAN {
        notes.push(format!("written as Explicit VR Little Endian from {}", s.transfer_syntax_name));
    }
    let photometric = match s.colour {
        StoredColour::Gray => s.photometric.clone(),
        StoredColour::Rgb => "RGB".to_string(),
        StoredColour::YbrFull => "YBR_FULL".to_string(),
    };
    if photometric != s.photometric {
        notes.push(format!("Photometric Interpretation {} written as {photometric} (the decoded samples)", s.photometric));
    }
    if s.was_planar {
        notes.push("Planar Configuration 1 written as 0 (interleaved)".to_string());
    }
    let all: Vec<u8> = s.frames.concat();
    let pixel_hash = Sha256::digest(&all);
    let before_bia = s.text(tags::BURNED_IN_ANNOTATION).and_then(|t| match t.as_str() {
        "YES" => Some(true),
        "NO" => Some(false),
        _ => None,
    });
    let sop_class = s.text(tags::SOP_CLASS_UID).unwrap_or_else(|| s.object.meta().media_storage_sop_class_uid().trim_end_matches('\0').to_string());
    let sop_instance = s.text(tags::SOP_INSTANCE_UID).unwrap_or_else(|| s.object.meta().media_storage_sop_instance_uid().trim_end_matches('\0').to_string());
    let new_uid = derived_uid(&[b"spurion clean", sop_instance.as_bytes(), settings_id.as_bytes(), &pixel_hash]);
    let image_type = {
        let mut v: Vec<String> = s.text(tags::IMAGE_TYPE).map(|t| t.split('\\').map(str::to_string).collect()).unwrap_or_default();
        if v.is_empty() {
            v = vec!["DERIVED".into(), "SECONDARY".into()];
        } else {
            v[0] = "DERIVED".into();
            if v.len() == 1 || v[1].is_empty() {
                v.truncate(1);
                v.push("SECONDARY".into());
            }
        }
        v.join("\\")
    };
    let pixel_value = match s.bits_allocated {
        8 => DataElement::new(tags::PIXEL_DATA, VR::OB, PrimitiveValue::U8(all.into())),
        16 => DataElement::new(tags::PIXEL_DATA, VR::OW, PrimitiveValue::U16(all.chunks_exact(2).map(|b| u16::from_ne_bytes([b[0], b[1]])).collect())),
        _ => DataElement::new(
            tags::PIXEL_DATA,
            VR::OW,
            PrimitiveValue::U16(
                all.chunks_exact(4)
                    .flat_map(|b| {
                        let v = u32::from_ne_bytes([b[0], b[1], b[2], b[3]]);
                        [(v & 0xffff) as u16, (v >> 16) as u16]
                    })
                    .collect(),
            ),
        ),
    };
    let mut obj: InMemDicomObject = s.object.into_inner();
    let code_item = InMemDicomObject::from_element_iter([
        text_element(tags::CODE_VALUE, VR::SH, CLEAN_PIXEL_DATA.0),
        text_element(tags::CODING_SCHEME_DESIGNATOR, VR::SH, CLEAN_PIXEL_DATA.1),
        text_element(tags::CODE_MEANING, VR::LO, CLEAN_PIXEL_DATA.2),
    ]);
    let mut methods: Vec<InMemDicomObject> =
        obj.get(tags::DEIDENTIFICATION_METHOD_CODE_SEQUENCE).and_then(|e| e.items()).map(|i| i.to_vec()).unwrap_or_default();
    let has_code = |o: &InMemDicomObject| o.get(tags::CODE_VALUE).and_then(|e| e.to_str().ok()).is_some_and(|v| v.trim() == CLEAN_PIXEL_DATA.0);
    if !methods.iter().any(has_code) {
        methods.push(code_item);
    }
    let source = InMemDicomObject::from_element_iter([
        text_element(tags::REFERENCED_SOP_CLASS_UID, VR::UI, &sop_class),
        text_element(tags::REFERENCED_SOP_INSTANCE_UID, VR::UI, &sop_instance),
    ]);
    let after_bia = marks_remain;
    obj.put(text_element(tags::SOP_INSTANCE_UID, VR::UI, &new_uid));
    obj.put(text_element(tags::IMAGE_TYPE, VR::CS, &image_type));
    obj.put(text_element(tags::DERIVATION_DESCRIPTION, VR::ST, DERIVATION));
    obj.put(DataElement::new(tags::SOURCE_IMAGE_SEQUENCE, VR::SQ, DataSetSequence::from(vec![source])));
    obj.put(DataElement::new(tags::DEIDENTIFICATION_METHOD_CODE_SEQUENCE, VR::SQ, DataSetSequence::from(methods)));
    obj.put(text_element(tags::BURNED_IN_ANNOTATION, VR::CS, if after_bia { "YES" } else { "NO" }));
    obj.put(text_element(tags::PHOTOMETRIC_INTERPRETATION, VR::CS, &photometric));
    if c == 3 {
        obj.put(DataElement::new(tags::PLANAR_CONFIGURATION, VR::US, PrimitiveValue::from(0u16)));
    }
    obj.put(pixel_value);
    let file = obj
        .with_meta(FileMetaTableBuilder::new().transfer_syntax(uids::EXPLICIT_VR_LITTLE_ENDIAN))
        .map_err(|e| anyhow!("the file meta group of the cleaned copy could not be made ({e})"))?;
    let mut bytes = Vec::new();
    file.write_all(&mut bytes).map_err(|e| anyhow!("the cleaned copy could not be encoded ({e})"))?;
    Ok(Cleaned {
        bytes,
        painted,
        changed,
        fill,
        note: notes.join("; "),
        burned_in_before: before_bia,
        burned_in_after: Some(after_bia),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn derived_uids_are_short_enough_repeatable_and_distinct() {
        let a = derived_uid(&[b"x", b"1.2.3"]);
        assert_eq!(a, derived_uid(&[b"x", b"1.2.3"]));
        assert_ne!(a, derived_uid(&[b"x", b"1.2.4"]));
        // The parts are length-prefixed, so moving a byte between parts changes the UID.
        assert_ne!(derived_uid(&[b"ab", b"c"]), derived_uid(&[b"a", b"bc"]));
        // PS3.5 9.1: at most 64 characters, digits and dots, no leading zero in a component.
        assert!(a.len() <= 64 && a.starts_with("2.25.") && a.chars().all(|c| c.is_ascii_digit() || c == '.'));
        assert!(!a[5..].starts_with('0'));
    }
}
