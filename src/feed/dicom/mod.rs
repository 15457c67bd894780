//! Reading DICOM images: the pixels after the Modality LUT, the VOI LUT facts the file carries,
//! and the patient-identifying attributes, kept apart from everything that goes into a report.
//!
//! Parsing and decoding are dicom-rs (dicom-object, dicom-pixeldata); the sample
//! interpretation (Bits Stored, Pixel Representation, YBR → RGB, the Modality LUT) is done here,
//! the way pydicom 3 does it, so that the two agree value for value (tests/dicom_reference.rs).
//!
//! Files: opening and the defects found before decoding (`open.rs`), the header, the samples,
//! the Modality LUT and the VOI LUT module (`pixels.rs`), the identifying attributes
//! (`privacy.rs`), every frame's stored samples for tools that write pixels back (`stored.rs`),
//! attribute access with messages that name the attribute (`attrs.rs`).

mod attrs;
mod open;
mod pixels;
mod privacy;
mod stored;

use std::borrow::Cow;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::Path;

use anyhow::{Context, Result, anyhow, bail};
use dicom_core::dictionary::{UidDictionary, UidDictionaryEntry};
use dicom_core::value::{PrimitiveValue, Value};
use dicom_core::Tag;
use dicom_dictionary_std::{StandardSopClassDictionary, tags, uids};
use dicom_encoding::{Codec, TransferSyntaxIndex};
use dicom_object::file::ReadPreamble;
use dicom_object::mem::InMemElement;
use dicom_object::{DefaultDicomObject, FileMetaTableBuilder, InMemDicomObject, OpenFileOptions};
use dicom_pixeldata::PixelDecoder;
use dicom_transfer_syntax_registry::TransferSyntaxRegistry;
use ndarray::Array3;
use serde::Serialize;

use super::window::{ResolvedWindow, VoiFunction};
use attrs::*;
use open::*;
use pixels::*;
use privacy::identifying;
pub use privacy::BASIC_PROFILE;
pub use stored::{StoredColour, StoredDicom, read_stored};

/// One DICOM image frame, read.
pub struct DicomImage {
    pub rows: usize,
    pub columns: usize,
    pub number_of_frames: usize,
    /// The frame that `values` holds (0-based).
    pub frame: usize,
    pub samples_per_pixel: usize,
    pub bits_allocated: u16,
    pub bits_stored: u16,
    /// Pixel Representation (0028,0103) = 1: two's complement samples.
    pub signed: bool,
    /// Photometric Interpretation as the file states it (the values of colour files are RGB).
    pub photometric: String,
    pub transfer_syntax_uid: String,
    pub transfer_syntax_name: String,
    /// Modality (0008,0060): CT, MR, CR, DX, …
    pub modality: Option<String>,
    /// H×W×C pixel values after the Modality LUT (PS3.3 C.11.1); C = 1, or 3 for RGB.
    pub values: Array3<f32>,
    pub modality_lut: ModalityLut,
    /// The range the Modality LUT output can span for these stored bits, low ≤ high: what
    /// pydicom's apply_windowing takes as its output range, and `full-range` maps to 0..1.
    pub value_range: (f64, f64),
    pub voi: VoiLutInfo,
    /// Burned In Annotation (0028,0301): YES → true, NO → false, absent or other text → None.
    pub burned_in_annotation: Option<bool>,
    identifying: Vec<(String, String)>,
}

/// The Modality LUT that turned stored values into `values` (PS3.3 C.11.1).
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum ModalityLut {
    None,
    Rescale { slope: f64, intercept: f64 },
    Table(LutTable),
}

/// A LUT of a Modality LUT or VOI LUT Sequence item (PS3.3 C.11.1.1.1, C.11.2.1.1).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LutTable {
    /// LUT Descriptor, second value: the first input value mapped.
    pub first_mapped: i32,
    /// LUT Descriptor, third value: bits per output entry.
    pub bits: u16,
    #[serde(skip)]
    pub data: Vec<u16>,
    /// LUT Explanation (free text, so never serialized into reports).
    #[serde(skip)]
    pub explanation: Option<String>,
}

impl LutTable {
    /// The entry for input `x`, as pydicom does it: inputs below the first mapped value take
    /// the first entry, inputs past the end the last, others entry ⌊x − first⌋.
    pub fn lookup(&self, x: f64) -> u16 {
        let last = self.data.len().saturating_sub(1);
        let offset = x - f64::from(self.first_mapped);
        let index = if offset <= 0.0 { 0 } else { (offset as usize).min(last) };
        self.data.get(index).copied().unwrap_or(0)
    }

    /// The largest output the table's bit depth allows.
    pub fn max_output(&self) -> f64 {
        2f64.powi(i32::from(self.bits)) - 1.0
    }
}

/// A Window Center/Width pair (0028,1050/1051) with its explanation (0028,1055).
#[derive(Debug, Clone, PartialEq)]
pub struct WindowSetting {
    pub center: f64,
    pub width: f64,
    pub explanation: Option<String>,
}

/// The VOI LUT module's content (PS3.3 C.11.2).
#[derive(Debug, Clone, PartialEq)]
pub struct VoiLutInfo {
    pub windows: Vec<WindowSetting>,
    /// VOI LUT Function (0028,1056), LINEAR when absent; `Err` holds text naming no function
    /// of PS3.3 C.11.2.1.3, which only matters once a file window is asked for.
    pub function: std::result::Result<VoiFunction, String>,
    pub tables: Vec<LutTable>,
}

/// What a report may say about a DICOM image: no identifying attribute, no free text.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DicomSummary {
    pub modality: Option<String>,
    pub rows: usize,
    pub columns: usize,
    pub samples_per_pixel: usize,
    pub bits_allocated: u16,
    pub bits_stored: u16,
    pub signed: bool,
    pub photometric: String,
    pub transfer_syntax_uid: String,
    pub transfer_syntax_name: String,
    pub frame: usize,
    pub number_of_frames: usize,
    pub modality_lut: ModalityLut,
    pub windows_in_file: Vec<WindowSummary>,
    pub voi_lut_tables_in_file: usize,
    pub burned_in_annotation: Option<bool>,
    /// Filled by the caller with `window::resolve` once a window has been chosen.
    pub window_used: Option<ResolvedWindow>,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct WindowSummary {
    pub center: f64,
    pub width: f64,
    pub function: Option<VoiFunction>,
}

impl DicomImage {
    /// The identifying attributes present (keyword, value), after `BASIC_PROFILE`; sequences
    /// are searched too, and a listed sequence itself shows as "(sequence of N items)".
    pub fn identifying(&self) -> &[(String, String)] {
        &self.identifying
    }

    pub fn is_color(&self) -> bool {
        self.samples_per_pixel == 3
    }

    /// MONOCHROME1: the lowest value is shown white (PS3.3 C.7.6.3.1.2).
    pub fn is_inverted(&self) -> bool {
        self.photometric == "MONOCHROME1"
    }

    /// The facts a report may carry; `window_used` is left for the caller.
    pub fn safe_summary(&self) -> DicomSummary {
        let function = self.voi.function.as_ref().ok().copied();
        DicomSummary {
            modality: self.modality.clone(),
            rows: self.rows,
            columns: self.columns,
            samples_per_pixel: self.samples_per_pixel,
            bits_allocated: self.bits_allocated,
            bits_stored: self.bits_stored,
            signed: self.signed,
            photometric: self.photometric.clone(),
            transfer_syntax_uid: self.transfer_syntax_uid.clone(),
            transfer_syntax_name: self.transfer_syntax_name.clone(),
            frame: self.frame,
            number_of_frames: self.number_of_frames,
            modality_lut: self.modality_lut.clone(),
            windows_in_file: self
                .voi
                .windows
                .iter()
                .map(|w| WindowSummary { center: w.center, width: w.width, function })
                .collect(),
            voi_lut_tables_in_file: self.voi.tables.len(),
            burned_in_annotation: self.burned_in_annotation,
            window_used: None,
        }
    }
}

/// Leaves out the identifying values (only their count shows) and the pixel values.
impl std::fmt::Debug for DicomImage {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("DicomImage")
            .field("rows", &self.rows)
            .field("columns", &self.columns)
            .field("number_of_frames", &self.number_of_frames)
            .field("frame", &self.frame)
            .field("samples_per_pixel", &self.samples_per_pixel)
            .field("bits_allocated", &self.bits_allocated)
            .field("bits_stored", &self.bits_stored)
            .field("signed", &self.signed)
            .field("photometric", &self.photometric)
            .field("transfer_syntax_uid", &self.transfer_syntax_uid)
            .field("transfer_syntax_name", &self.transfer_syntax_name)
            .field("modality", &self.modality)
            .field("values", &format_args!("{:?} f32", self.values.shape()))
            .field("modality_lut", &self.modality_lut)
            .field("value_range", &self.value_range)
            .field("voi", &self.voi)
            .field("burned_in_annotation", &self.burned_in_annotation)
            .field("identifying", &format_args!("{} attributes withheld", self.identifying.len()))
            .finish()
    }
}

/// Whether `bytes` (a whole file or at least its first 132 bytes) look like DICOM: the
/// 128-byte preamble and "DICM" (PS3.10 7.1), "DICM" without preamble, or a data set without
/// file meta group that starts in group 0008 in one of the three uncompressed encodings.
pub fn is_dicom(bytes: &[u8]) -> bool {
    bytes.get(128..132) == Some(b"DICM") || bytes.starts_with(b"DICM") || sniff_encoding(bytes).is_some()
}

/// Reads frame `frame` (0-based) of the DICOM file at `path`. The file is only read.
pub fn read_dicom(path: &Path, frame: usize) -> Result<DicomImage> {
    let bytes = std::fs::read(path)
        .with_context(|| format!("cannot read {}: check that the file exists and is readable", path.display()))?;
    // dicom-rs and the codecs it drives (jpeg-decoder, a port of OpenJPEG) may panic on
    // malformed data; a panic here is turned into an error as a last resort.
    match catch_unwind(AssertUnwindSafe(|| read_bytes(&bytes, frame))) {
        Ok(result) => result.map_err(|problem| anyhow!("{} {problem}", path.display())),
        Err(_) => bail!(
            "{} made the DICOM decoder fail (it panicked): the file is damaged or uses a form the \
             decoder does not handle. Convert it to an uncompressed transfer syntax (for example \
             with gdcmconv --raw) and try again.",
            path.display()
        ),
    }
}

/// What is wrong with a file, phrased to follow its name: "is truncated: …".
type Problem = String;

fn read_bytes(bytes: &[u8], frame: usize) -> std::result::Result<DicomImage, Problem> {
    if let Some(defect) = find_defect(bytes) {
        return Err(defect_problem(bytes, &defect));
    }
    let obj = open(bytes, None).map_err(|e| unreadable(bytes, &e))?;
    if obj.get(tags::PIXEL_DATA).is_none() {
        return Err(no_pixel_data(&obj));
    }
    let ts = transfer_syntax(&obj)?;
    let layout = Layout::from_header(&obj)?;
    if frame >= layout.frames {
        return Err(format!(
            "has {} frame(s), numbered 0 to {}; frame {frame} does not exist. Choose a frame below {}.",
            layout.frames,
            layout.frames - 1,
            layout.frames
        ));
    }
    let (raw, colour) = frame_samples(&obj, &ts, &layout, frame)?;
    let samples = interpret(&raw, &layout);
    let modality_lut = modality_lut(&obj, &layout)?;
    let values = to_values(samples, colour, &layout, &modality_lut)?;
    Ok(DicomImage {
        rows: layout.rows,
        columns: layout.columns,
        number_of_frames: layout.frames,
        frame,
        samples_per_pixel: layout.samples,
        bits_allocated: layout.bits_allocated,
        bits_stored: layout.bits_stored,
        signed: layout.signed,
        photometric: layout.photometric.clone(),
        transfer_syntax_uid: ts.uid.to_string(),
        transfer_syntax_name: ts.name.to_string(),
        modality: text(&obj, tags::MODALITY),
        value_range: value_range(&layout, &modality_lut),
        modality_lut,
        voi: voi_info(&obj, &layout)?,
        burned_in_annotation: text(&obj, tags::BURNED_IN_ANNOTATION).and_then(|t| match t.as_str() {
            "YES" => Some(true),
            "NO" => Some(false),
            _ => None,
        }),
        identifying: identifying(&obj),
        values,
    })
}

