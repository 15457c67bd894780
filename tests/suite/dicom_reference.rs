//! read_dicom and window::apply against pydicom 3.0.2 (apply_modality_lut, apply_voi_lut) on
//! pydicom's bundled test files and on derived files made by tests/reference/pydicom_lut.py.
//! The fixtures (fixtures/reference.json, fixtures/ref/*.npy) come from that script; each
//! file's row in reference.json names the file, and the script's BUNDLED list says what each
//! file covers (transfer syntax, bits, colour).

use std::collections::BTreeMap;

use spurion::feed::dicom::{DicomImage, read_dicom};
use spurion::feed::window::{Windowing, apply};
use ndarray::{Array3, ArrayD, Ix3, s};
use ndarray_npy::ReadNpyExt;
use serde::Deserialize;

#[derive(Deserialize)]
struct Reference {
    files: Vec<Facts>,
}

#[derive(Deserialize)]
struct Facts {
    file: String,
    derived: bool,
    frame: usize,
    rows: usize,
    columns: usize,
    frames: usize,
    samples_per_pixel: usize,
    bits_allocated: u16,
    bits_stored: u16,
    pixel_representation: u8,
    photometric: String,
    transfer_syntax: String,
    modality: String,
    burned_in_annotation: Option<String>,
    window_centers: Vec<f64>,
    window_widths: Vec<f64>,
    window_explanations: Vec<String>,
    voi_function: String,
    voi_lut_items: usize,
    stride: usize,
    modality_stats: Stats,
    voi: Vec<VoiRef>,
}

#[derive(Deserialize)]
struct Stats {
    min: f64,
    max: f64,
    sum: f64,
}

#[derive(Deserialize)]
struct VoiRef {
    index: usize,
    y_min: f64,
    y_max: f64,
    stats: Stats,
}

fn reference() -> Reference {
    let text = std::fs::read_to_string(crate::dicom_common::fixtures().join("reference.json")).expect("fixtures/reference.json");
    serde_json::from_str(&text).expect("reference.json parses")
}

fn npy(name: &str) -> Array3<f32> {
    let f = std::fs::File::open(crate::dicom_common::fixtures().join("ref").join(name)).unwrap_or_else(|e| panic!("{name}: {e}"));
    let a = ArrayD::<f32>::read_npy(f).unwrap_or_else(|e| panic!("{name}: {e}"));
    match a.ndim() {
        2 => a.insert_axis(ndarray::Axis(2)).into_dimensionality::<Ix3>().unwrap(),
        _ => a.into_dimensionality::<Ix3>().unwrap(),
    }
}

/// Largest |ours − theirs| over the sampled grid.
fn max_diff(ours: &Array3<f32>, theirs: &Array3<f32>, stride: usize) -> f64 {
    let sampled = ours.slice(s![..;stride, ..;stride, ..]);
    assert_eq!(sampled.shape(), theirs.shape(), "sample grid shapes");
    sampled.iter().zip(theirs.iter()).map(|(a, b)| f64::from((a - b).abs())).fold(0.0, f64::max)
}

fn sum(a: &Array3<f32>) -> f64 {
    a.iter().map(|&v| f64::from(v)).sum()
}

fn read(f: &Facts) -> DicomImage {
    let path = crate::dicom_common::dicom_path(&f.file, f.derived);
    read_dicom(&path, f.frame).unwrap_or_else(|e| panic!("{}: {e:#}", f.file))
}

/// How far our Modality LUT output may be from pydicom's: (per pixel, mean over the frame).
/// Lossless files and JPEG 2000 must match exactly (up to f32 rounding): openjp2 is a port of
/// OpenJPEG, which pylibjpeg-openjpeg wraps. JPEG baseline/extended is decoded by jpeg-decoder
/// here and by libjpeg for pydicom: one grey level apart (IDCT rounding), and up to three where
/// chroma is subsampled (YBR_FULL_422), whose upsampling ITU T.81 leaves to the decoder.
fn tolerance(f: &Facts) -> (f64, f64) {
    let jpeg = ["1.2.840.10008.1.2.4.50", "1.2.840.10008.1.2.4.51"].contains(&f.transfer_syntax.as_str());
    match (jpeg, f.photometric.as_str()) {
        (true, "YBR_FULL_422") => (3.0, 0.05),
        (true, _) => (1.0, 0.05),
        (false, _) => (1e-3, 1e-3),
    }
}

// Header facts: pydicom's Dataset values for the same file (reference.json).
#[test]
fn header_facts_match_pydicom() {
    let Some(_) = crate::common::reference_python() else { return };
    for f in reference().files {
        let img = read(&f);
        let name = &f.file;
        assert_eq!((img.rows, img.columns), (f.rows, f.columns), "{name}: Rows, Columns");
        assert_eq!(img.number_of_frames, f.frames, "{name}: Number of Frames");
        assert_eq!(img.samples_per_pixel, f.samples_per_pixel, "{name}: Samples per Pixel");
        assert_eq!((img.bits_allocated, img.bits_stored), (f.bits_allocated, f.bits_stored), "{name}: bits");
        assert_eq!(img.signed, f.pixel_representation == 1, "{name}: Pixel Representation");
        assert_eq!(img.photometric, f.photometric, "{name}: Photometric Interpretation");
        assert_eq!(img.transfer_syntax_uid, f.transfer_syntax, "{name}: transfer syntax (detected by pydicom for meta-less files)");
        assert_eq!(img.modality.clone().unwrap_or_default(), f.modality, "{name}: Modality");
        let burned = f.burned_in_annotation.as_deref().map(|t| t == "YES");
        assert_eq!(img.burned_in_annotation, burned, "{name}: Burned In Annotation");
        let centers: Vec<f64> = img.voi.windows.iter().map(|w| w.center).collect();
        let widths: Vec<f64> = img.voi.windows.iter().map(|w| w.width).collect();
        assert_eq!(centers, f.window_centers, "{name}: Window Center");
        assert_eq!(widths, f.window_widths, "{name}: Window Width");
        let explanations: Vec<String> = img.voi.windows.iter().filter_map(|w| w.explanation.clone()).collect();
        assert_eq!(explanations, f.window_explanations, "{name}: Window Center & Width Explanation");
        assert_eq!(img.voi.tables.len(), f.voi_lut_items, "{name}: VOI LUT Sequence items");
        if !f.voi_function.is_empty() {
            let ours = img.voi.function.as_ref().map(|v| format!("{v:?}")).unwrap_or_default();
            let theirs = f.voi_function.replace('_', "").to_ascii_lowercase();
            assert_eq!(ours.to_ascii_lowercase(), theirs, "{name}: VOI LUT Function");
        }
    }
}

// Modality LUT output: pydicom.pixels.apply_modality_lut(ds.pixel_array, ds), sampled, and
// its min / max / sum over the whole frame. Colour files: pydicom's pixel_array in RGB.
#[test]
fn modality_values_match_pydicom() {
    let Some(_) = crate::common::reference_python() else { return };
    let mut failures = Vec::new();
    for f in reference().files {
        let img = read(&f);
        let theirs = npy(&format!("{}.modality.npy", f.file));
        let (tolerance, mean_tolerance) = tolerance(&f);
        let diff = max_diff(&img.values, &theirs, f.stride);
        let pixels = img.values.len() as f64;
        let (min, max) = img.values.iter().fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(v.into()), b.max(v.into())));
        let st = &f.modality_stats;
        let mean_diff = (sum(&img.values) - st.sum).abs() / pixels;
        let range_diff = (min - st.min).abs().max((max - st.max).abs());
        if diff > tolerance || range_diff > tolerance || mean_diff > mean_tolerance {
            failures.push(format!(
                "{}: sampled values differ by up to {diff}, range {min}..{max} vs {}..{}, mean by {mean_diff} (tolerance {tolerance})",
                f.file, st.min, st.max
            ));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n"));
}

// VOI output: pydicom.pixels.apply_voi_lut(modality, ds, index=k), brought to 0..1 by its own
// output range (the window of ∓1e30, or the LUT's 2^bits − 1) and inverted for MONOCHROME1,
// which pydicom leaves to the caller. One grey level = 1/(y_max − y_min), plus what one grey
// level of modality input moves the window's output (1/(w − 1) for LINEAR).
#[test]
fn voi_output_matches_pydicom() {
    let Some(_) = crate::common::reference_python() else { return };
    let mut checked = 0;
    for f in reference().files {
        if f.voi.is_empty() {
            continue;
        }
        let img = read(&f);
        for v in &f.voi {
            if f.voi_lut_items == 0 {
                // The range pydicom's apply_windowing maps onto: value_range, as FullRange uses it.
                assert_eq!(img.value_range, (v.y_min, v.y_max), "{}: output range of the windows", f.file);
            }
            let ours = apply(&img, &Windowing::File { index: v.index }).unwrap_or_else(|e| panic!("{}: {e:#}", f.file));
            let range = v.y_max - v.y_min;
            let mut theirs = npy(&format!("{}.voi{}.npy", f.file, v.index)).mapv(|y| ((f64::from(y) - v.y_min) / range) as f32);
            if img.is_inverted() {
                theirs.mapv_inplace(|y| 1.0 - y);
            }
            // One output level, plus what the input's tolerance moves the window's output:
            // its steepest slope is 1/(w − 1) for LINEAR, 1/w for LINEAR_EXACT and SIGMOID.
            let width = f.window_widths.get(v.index).copied().unwrap_or(1.0);
            let tolerance = 1.0 / range + tolerance(&f).0 / (width - 1.0).max(1.0) + 1e-6;
            let diff = max_diff(&ours, &theirs, f.stride);
            assert!(diff <= tolerance, "{} window {}: differs by up to {diff} (tolerance {tolerance})", f.file, v.index);
            let normalise = |y: f64| {
                let n = (y - v.y_min) / range;
                if img.is_inverted() { 1.0 - n } else { n }
            };
            let (lo, hi) = (normalise(v.stats.min), normalise(v.stats.max));
            let (lo, hi) = (lo.min(hi), lo.max(hi));
            let (our_lo, our_hi) = ours.iter().fold((f64::MAX, f64::MIN), |(a, b), &y| (a.min(y.into()), b.max(y.into())));
            assert!((our_lo - lo).abs() <= tolerance && (our_hi - hi).abs() <= tolerance, "{} window {}: range {our_lo}..{our_hi} vs {lo}..{hi}", f.file, v.index);
            let mean_theirs = normalise(v.stats.sum / ours.len() as f64);
            let mean_ours = sum(&ours) / ours.len() as f64;
            assert!((mean_ours - mean_theirs).abs() <= tolerance, "{} window {}: mean {mean_ours} vs {mean_theirs}", f.file, v.index);
            checked += 1;
        }
    }
    // MR_small* (7 files), 693_J2KI, J2K_pixelrep_mismatch (3), examples_overlay (2), the
    // derived LINEAR_EXACT (2), SIGMOID (2), VOI LUT and Modality LUT files.
    assert!(checked >= 18, "only {checked} windows were compared");
}

// Colour files: full-range scales by 2^bits − 1 (the brief's rule for colour), checked
// against pydicom's RGB pixel_array divided by the same.
#[test]
fn colour_full_range_is_rgb_over_max() {
    let Some(_) = crate::common::reference_python() else { return };
    let mut checked = 0;
    for f in reference().files.iter().filter(|f| f.samples_per_pixel == 3) {
        let img = read(f);
        let ours = apply(&img, &Windowing::FullRange).unwrap();
        let max = 2f64.powi(i32::from(f.bits_stored)) - 1.0;
        let theirs = npy(&format!("{}.modality.npy", f.file)).mapv(|v| (f64::from(v) / max) as f32);
        let diff = max_diff(&ours, &theirs, f.stride);
        assert!(diff <= tolerance(f).0 / max + 1e-6, "{}: differs by {diff}", f.file);
        checked += 1;
    }
    assert!(checked >= 12, "only {checked} colour files");
}

// The pydicom facts the privacy test needs, from reference.json.
#[derive(Deserialize)]
pub(crate) struct PrivacyFacts {
    pub(crate) file: String,
    #[serde(default)]
    text_elements: BTreeMap<String, String>,
}

/// Values that must not leak: every PN, date, time and UID text of the file (pydicom's
/// reading), except the standard's own UIDs (1.2.840.10008.…, such as transfer syntaxes),
/// and every value of an attribute on the Basic Profile list.
pub(crate) fn secrets(facts: &PrivacyFacts) -> Vec<(String, String)> {
    let profile: Vec<&str> = spurion::feed::dicom::BASIC_PROFILE.iter().map(|(k, _)| *k).collect();
    let dictionary = dicom_dictionary_std::StandardDataDictionary;
    facts
        .text_elements
        .iter()
        .filter(|(keyword, value)| {
            use dicom_core::dictionary::{DataDictionary, DataDictionaryEntry};
            let vr = dictionary.by_name(keyword).map(|e| e.vr().relaxed().to_string().to_string()).unwrap_or_default();
            let sensitive_vr = ["PN", "DA", "TM", "DT", "UI"].contains(&vr.as_str());
            (sensitive_vr || profile.contains(&keyword.as_str())) && !value.starts_with("1.2.840.10008.") && value.trim().len() >= 2
        })
        .map(|(k, v)| (k.clone(), v.clone()))
        .collect()
}

// Privacy (the brief's check 4): {:?} of a DicomImage and the JSON of safe_summary() hold none
// of the identifying values pydicom reads from CT_small.dcm and MR_small.dcm; identifying()
// holds them, with pydicom's values, for each Basic Profile attribute present.
#[test]
fn no_identifying_value_in_debug_or_summary() {
    let Some(_) = crate::common::reference_python() else { return };
    let text = std::fs::read_to_string(crate::dicom_common::fixtures().join("reference.json")).unwrap();
    let all: serde_json::Value = serde_json::from_str(&text).unwrap();
    let mut checked = 0;
    for entry in all["files"].as_array().unwrap() {
        let facts: PrivacyFacts = serde_json::from_value(entry.clone()).unwrap();
        if facts.text_elements.is_empty() {
            continue;
        }
        let img = read_dicom(&crate::dicom_common::dicom_path(&facts.file, false), 0).unwrap();
        let debug = format!("{img:?}");
        let summary = serde_json::to_string(&img.safe_summary()).unwrap();
        let secrets = secrets(&facts);
        assert!(secrets.iter().any(|(k, _)| k == "PatientName"), "{}: pydicom saw no PatientName", facts.file);
        for (keyword, value) in &secrets {
            assert!(!debug.contains(value.as_str()), "{}: {keyword} '{value}' shows in Debug:\n{debug}", facts.file);
            assert!(!summary.contains(value.as_str()), "{}: {keyword} '{value}' shows in the summary:\n{summary}", facts.file);
        }
        // Every Basic Profile attribute pydicom found is in identifying(), with its value.
        for (keyword, _) in spurion::feed::dicom::BASIC_PROFILE {
            if let Some(value) = facts.text_elements.get(*keyword) {
                let ours: Vec<&String> = img.identifying().iter().filter(|(k, _)| k == keyword).map(|(_, v)| v).collect();
                assert!(ours.contains(&value), "{}: identifying() lacks {keyword} = '{value}' (has {ours:?})", facts.file);
                checked += 1;
            }
        }
    }
    assert!(checked >= 10, "only {checked} identifying attributes compared");
}
