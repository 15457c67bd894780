//! Corrupt, truncated, unsupported and image-less files give an Err that names the file and
//! the reason, never a panic. The files are pydicom's bundled test files (pydicom.data); what
//! each one is comes from pydicom 3.0.2 reading it (noted beside each case).

use std::path::PathBuf;

use spurion::feed::dicom::read_dicom;

fn error_of(path: &std::path::Path, frame: usize) -> String {
    match read_dicom(path, frame) {
        Ok(img) => panic!("{} read as {img:?}, expected an error", path.display()),
        Err(e) => format!("{e:#}"),
    }
}

fn expect(name: &str, frame: usize, parts: &[&str]) {
    let path = crate::dicom_common::pydicom_files().join(name);
    let err = error_of(&path, frame);
    assert!(err.contains(name), "the error does not name the file: {err}");
    for part in parts {
        assert!(err.contains(part), "{name}: expected '{part}' in: {err}");
    }
    assert!(!err.contains("panicked"), "{name}: only the panic guard caught this: {err}");
}

#[test]
fn truncated_files() {
    let Some(_) = crate::common::reference_python() else { return };
    // pydicom: len(ds.PixelData) = 8130; Rows × Columns × 2 bytes = 64 × 64 × 2 = 8192.
    expect("MR_truncated.dcm", 0, &["is truncated: the pixel data ends after 8130 of 8192 bytes", "Copy the file again"]);
    // pydicom reads 32 elements and stops inside a sequence; SOP class RT Plan Storage. The
    // file is 2129 bytes; at byte 1410 (implicit VR) stand tag (300A,00B0) Beam Sequence and
    // the length 976 (struct.unpack("<HHI") in Python), 711 bytes before the end.
    expect("rtplan_truncated.dcm", 0, &[
        "is truncated or damaged (it is an RT Plan): attribute (300A,00B0) at byte 1410 says it holds 976 bytes, but the file has only 711 left",
    ]);
}

#[test]
fn bad_header_values() {
    let Some(_) = crate::common::reference_python() else { return };
    // pydicom: Number of Frames (IS) = '1A', "Invalid value for VR IS".
    expect("badVR.dcm", 0, &["Number of Frames (0028,0008) = '1A'", "not a whole number", "Fix the header"]);
}

#[test]
fn files_without_pixel_data() {
    let Some(_) = crate::common::reference_python() else { return };
    // pydicom: SOPClassUID.name of each, and no PixelData element.
    expect("rtplan.dcm", 0, &["has no pixel data (it is an RT Plan, which holds no image)", "open an image file"]);
    expect("test-SR.dcm", 0, &["has no pixel data (it is a Comprehensive SR, which holds no image)"]);
    // Meta-less files (pydicom: file_meta has no Transfer Syntax UID): explicit VR big and
    // little endian RT Plans, and an RT Structure Set in implicit VR.
    expect("ExplVR_BigEndNoMeta.dcm", 0, &["has no pixel data (it is an RT Ion Plan"]);
    expect("ExplVR_LitEndNoMeta.dcm", 0, &["has no pixel data (it is an RT Ion Plan"]);
    expect("rtstruct.dcm", 0, &["has no pixel data (it is an RT Structure Set"]);
    // no_meta.dcm starts with a stray byte 0x20 before (0008,0005): pydicom, even with
    // force=True, reads it as one UN element (0820,0500), and no image either.
    expect("no_meta.dcm", 0, &["has neither the DICM marker"]);
}

#[test]
fn unsupported_transfer_syntaxes_are_named() {
    let Some(_) = crate::common::reference_python() else { return };
    // Transfer syntax UIDs and names: PS3.5 Annex A (names as dicom-rs's registry gives them).
    expect("MR_small_jpeg_ls_lossless.dcm", 0, &[
        "uses the transfer syntax JPEG-LS Lossless Image Compression (1.2.840.10008.1.2.4.80), which spurion cannot decode",
        "gdcmconv --raw",
    ]);
    expect("JPEGLSNearLossless_08.dcm", 0, &["(1.2.840.10008.1.2.4.81)", "cannot decode"]);
    // pydicom: Bits Stored 12 in JPEG Extended (process 4); jpeg-decoder takes 8-bit only.
    expect("JPGExtended.dcm", 0, &["JPEG Extended (Process 2 & 4) (1.2.840.10008.1.2.4.51) with 12-bit samples, which spurion cannot decode"]);
    expect("JPEG-lossy.dcm", 0, &["(1.2.840.10008.1.2.4.51) with 12-bit samples"]);
    // pydicom: Bits Allocated 32; dicom-rs's RLE decoder takes 8 or 16.
    expect("SC_rgb_rle_32bit.dcm", 0, &["RLE Lossless (1.2.840.10008.1.2.5) with 32 bits allocated"]);
    expect("rtdose_rle.dcm", 0, &["RLE Lossless (1.2.840.10008.1.2.5) with 32 bits allocated"]);
}

#[test]
fn unsupported_image_kinds() {
    let Some(_) = crate::common::reference_python() else { return };
    // pydicom: Photometric Interpretation PALETTE COLOR; Bits Allocated 1 (a segmentation).
    expect("examples_palette.dcm", 0, &["PALETTE COLOR", "does not convert yet"]);
    expect("liver_1frame.dcm", 0, &["has 1 bits allocated"]);
    // pydicom (pylibjpeg-openjpeg) decodes this one; openjp2 stops at the sequence delimiter
    // inside the codestream's fragment.
    expect("JPEG2000-embedded-sequence-delimiter.dcm", 0, &["JPEG 2000 Image Compression pixel data that could not be decoded"]);
}

#[test]
fn frames_out_of_range() {
    let Some(_) = crate::common::reference_python() else { return };
    // pydicom: NumberOfFrames 2 and 15.
    expect("SC_rgb_rle_2frame.dcm", 2, &["has 2 frame(s), numbered 0 to 1; frame 2 does not exist"]);
    expect("rtdose.dcm", 15, &["has 15 frame(s), numbered 0 to 14"]);
    assert!(read_dicom(&crate::dicom_common::pydicom_files().join("rtdose.dcm"), 14).is_ok());
}

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("dicom-proto-errors-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir.join(name)
}

#[test]
fn not_dicom_and_missing() {
    let Some(_) = crate::common::reference_python() else { return };
    let path = scratch("notes.dcm");
    std::fs::write(&path, b"Brackenridge Imaging Cooperative: shift notes, not an image\n").unwrap();
    let err = error_of(&path, 0);
    assert!(err.contains("notes.dcm") && err.contains("has neither the DICM marker"), "{err}");
    let missing = scratch("missing.dcm");
    let err = error_of(&missing, 0);
    assert!(err.contains("missing.dcm") && err.contains("cannot read"), "{err}");
}

// Every prefix of MR_small.dcm and CT_small.dcm (every 61st length) and copies with one byte
// overwritten: Ok or an Err naming the file, and never a panic caught by the guard only.
#[test]
fn cut_and_damaged_files_never_panic() {
    let Some(_) = crate::common::reference_python() else { return };
    let mut errors = 0;
    for name in ["MR_small.dcm", "CT_small.dcm"] {
        let bytes = std::fs::read(crate::dicom_common::pydicom_files().join(name)).unwrap();
        let path = scratch(&format!("cut-{name}"));
        let mut check = |data: &[u8], what: &str| {
            std::fs::write(&path, data).unwrap();
            let started = std::time::Instant::now();
            let result = read_dicom(&path, 0);
            // A damaged length must not make dicom-rs allocate (and zero) gigabytes.
            assert!(started.elapsed().as_secs() < 2, "{what}: took {:?}", started.elapsed());
            if let Err(e) = result {
                let e = format!("{e:#}");
                assert!(e.contains(&format!("cut-{name}")), "{what}: {e}");
                assert!(!e.contains("panicked"), "{what}: the decoder panicked: {e}");
                errors += 1;
            }
        };
        for len in (0..bytes.len()).step_by(61) {
            check(&bytes[..len], &format!("{name} cut at {len}"));
        }
        for at in (0..bytes.len()).step_by(89) {
            let mut damaged = bytes.clone();
            damaged[at] ^= 0xA5;
            check(&damaged, &format!("{name} with byte {at} changed"));
        }
    }
    assert!(errors > 100, "only {errors} of the damaged files were refused");
}
