//! A DICOM file's stored samples, every frame, with the parsed object they came from: what a
//! tool that changes pixels and writes the file again needs (`spurion clean`). Reading for a
//! model goes through [`super::read_dicom`] instead.

use super::*;

/// The colour space the samples of [`StoredDicom::frames`] are in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum StoredColour {
    /// One sample per pixel, as the file's MONOCHROME1 or MONOCHROME2.
    Gray,
    /// R, G, B per pixel: the file's RGB, or what a JPEG / JPEG 2000 decoder gave back.
    Rgb,
    /// Y, Cb, Cr per pixel (YBR_FULL, and YBR_FULL_422 with each pair's Cb and Cr repeated).
    YbrFull,
}

/// A file's samples as stored: each frame interleaved, native byte order, uncompressed.
pub struct StoredDicom {
    /// The whole parsed file (header, meta group, pixel data as it was).
    pub object: DefaultDicomObject,
    pub rows: usize,
    pub columns: usize,
    pub samples_per_pixel: usize,
    pub bits_allocated: u16,
    pub bits_stored: u16,
    pub signed: bool,
    pub colour: StoredColour,
    /// One `rows × columns × samples_per_pixel × bits_allocated / 8` byte run per frame.
    pub frames: Vec<Vec<u8>>,
    /// The file's transfer syntax: UID, name, and whether its pixel data was encapsulated
    /// (compressed).
    pub transfer_syntax_uid: String,
    pub transfer_syntax_name: String,
    pub was_encapsulated: bool,
    /// Planar Configuration 1 in the file (the frames here are interleaved all the same).
    pub was_planar: bool,
    /// The file's Photometric Interpretation.
    pub photometric: String,
}

/// Reads every frame of the DICOM file at `path` as stored samples. The file is only read.
pub fn read_stored(path: &Path) -> Result<StoredDicom> {
    let bytes = std::fs::read(path)
        .with_context(|| format!("cannot read {}: check that the file exists and is readable", path.display()))?;
    match catch_unwind(AssertUnwindSafe(|| stored_from_bytes(&bytes))) {
        Ok(result) => result.map_err(|problem| anyhow!("{} {problem}", path.display())),
        Err(_) => bail!(
            "{} made the DICOM decoder fail (it panicked): the file is damaged or uses a form the \
             decoder does not handle. Convert it to an uncompressed transfer syntax (for example \
             with gdcmconv --raw) and try again.",
            path.display()
        ),
    }
}

fn stored_from_bytes(bytes: &[u8]) -> std::result::Result<StoredDicom, Problem> {
    if let Some(defect) = find_defect(bytes) {
        return Err(defect_problem(bytes, &defect));
    }
    let obj = open(bytes, None).map_err(|e| unreadable(bytes, &e))?;
    if obj.get(tags::PIXEL_DATA).is_none() {
        return Err(no_pixel_data(&obj));
    }
    let ts = transfer_syntax(&obj)?;
    let layout = Layout::from_header(&obj)?;
    let mut frames = Vec::with_capacity(layout.frames);
    let mut colour = Colour::Gray;
    for f in 0..layout.frames {
        let (raw, c) = frame_samples(&obj, &ts, &layout, f)?;
        colour = c;
        frames.push(raw);
    }
    Ok(StoredDicom {
        rows: layout.rows,
        columns: layout.columns,
        samples_per_pixel: layout.samples,
        bits_allocated: layout.bits_allocated,
        bits_stored: layout.bits_stored,
        signed: layout.signed,
        colour: match colour {
            Colour::Gray => StoredColour::Gray,
            Colour::Rgb => StoredColour::Rgb,
            Colour::YbrFull => StoredColour::YbrFull,
        },
        frames,
        transfer_syntax_uid: ts.uid.to_string(),
        transfer_syntax_name: ts.name.to_string(),
        was_encapsulated: ts.encapsulated,
        was_planar: layout.planar,
        photometric: layout.photometric.clone(),
        object: obj,
    })
}

impl StoredDicom {
    /// The stored values of one frame as integers (low Bits Stored bits, sign-extended when
    /// signed), in the order of the frame's samples.
    pub fn values(&self, frame: usize) -> Vec<i64> {
        let layout = self.layout();
        interpret(&self.frames[frame], &layout)
    }

    /// The lowest and highest value Bits Stored and Pixel Representation allow.
    pub fn value_limits(&self) -> (i64, i64) {
        let bits = u32::from(self.bits_stored);
        if self.signed { (-(1i64 << (bits - 1)), (1i64 << (bits - 1)) - 1) } else { (0, (1i64 << bits) - 1) }
    }

    fn layout(&self) -> Layout {
        Layout {
            rows: self.rows,
            columns: self.columns,
            samples: self.samples_per_pixel,
            frames: self.frames.len(),
            bits_allocated: self.bits_allocated,
            bits_stored: self.bits_stored,
            signed: self.signed,
            planar: false,
            photometric: self.photometric.clone(),
        }
    }

    /// A text attribute of the file, trimmed; `None` when absent or empty.
    pub fn text(&self, tag: Tag) -> Option<String> {
        text(&self.object, tag)
    }
}
