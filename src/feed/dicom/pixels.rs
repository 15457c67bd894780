//! From the header to pixel values: what the samples are, decoding one frame, the Modality LUT
//! (PS3.3 C.11.1), colour, and the VOI LUT module (PS3.3 C.11.2).

use super::*;

// The header: what the samples are.

pub(super) struct TsFacts {
    pub(super) uid: &'static str,
    pub(super) name: &'static str,
    pub(super) big_endian: bool,
    pub(super) encapsulated: bool,
    /// JPEG and JPEG 2000 decoders hand back RGB for three-sample images.
    pub(super) decoder_gives_rgb: bool,
}

pub(super) fn transfer_syntax(obj: &DefaultDicomObject) -> std::result::Result<TsFacts, Problem> {
    let uid = obj.meta().transfer_syntax().trim_end_matches('\0');
    let ts = TransferSyntaxRegistry.get(uid).ok_or_else(|| {
        format!(
            "uses the transfer syntax {uid}, which is not one of the DICOM standard's (PS3.5 \
             Annex A) that spurion knows. Convert the file to Explicit VR Little Endian first."
        )
    })?;
    let encapsulated = ts.is_encapsulated_pixel_data();
    if encapsulated && !matches!(ts.codec(), Codec::EncapsulatedPixelData(Some(_), _)) {
        return Err(cannot_decode(ts.name(), ts.uid(), ""));
    }
    let rle = ts.uid() == uids::RLE_LOSSLESS;
    Ok(TsFacts {
        uid: ts.uid(),
        name: ts.name(),
        big_endian: matches!(ts.endianness(), dicom_encoding::Endianness::Big),
        encapsulated,
        decoder_gives_rgb: encapsulated && !rle,
    })
}

pub(super) fn cannot_decode(name: &str, uid: &str, detail: &str) -> Problem {
    format!(
        "uses the transfer syntax {name} ({uid}){detail}, which spurion cannot decode. Convert it \
         to an uncompressed transfer syntax (for example with gdcmconv --raw or DCMTK's dcmdjpeg / \
         dcmdjpls) and read the converted file."
    )
}

/// The Image Pixel module's facts (PS3.3 C.7.6.3) that decide how samples are laid out.
pub(super) struct Layout {
    pub(super) rows: usize,
    pub(super) columns: usize,
    pub(super) samples: usize,
    pub(super) frames: usize,
    pub(super) bits_allocated: u16,
    pub(super) bits_stored: u16,
    pub(super) signed: bool,
    pub(super) planar: bool,
    pub(super) photometric: String,
}

impl Layout {
    pub(super) fn from_header(obj: &DefaultDicomObject) -> std::result::Result<Layout, Problem> {
        let rows = required_int(obj, tags::ROWS, "Rows")?;
        let columns = required_int(obj, tags::COLUMNS, "Columns")?;
        let bits_allocated = required_int(obj, tags::BITS_ALLOCATED, "Bits Allocated")?;
        let bits_stored = optional_int(obj, tags::BITS_STORED, "Bits Stored")?.unwrap_or(bits_allocated);
        let representation = optional_int(obj, tags::PIXEL_REPRESENTATION, "Pixel Representation")?.unwrap_or(0);
        let samples = optional_int(obj, tags::SAMPLES_PER_PIXEL, "Samples per Pixel")?.unwrap_or(1);
        let frames = optional_int(obj, tags::NUMBER_OF_FRAMES, "Number of Frames")?.unwrap_or(1).max(1);
        let planar = optional_int(obj, tags::PLANAR_CONFIGURATION, "Planar Configuration")?.unwrap_or(0) == 1;
        let photometric = text(obj, tags::PHOTOMETRIC_INTERPRETATION)
            .ok_or("has no Photometric Interpretation (0028,0004). Fix the header (it is required).")?;
        if rows == 0 || columns == 0 {
            return Err(format!("has an empty image ({rows} × {columns} pixels)."));
        }
        if ![8, 16, 32].contains(&bits_allocated) {
            return Err(format!(
                "has {bits_allocated} bits allocated per sample; spurion reads 8, 16 or 32 (1-bit \
                 segmentations and overlays are not images it can explain)."
            ));
        }
        if bits_stored == 0 || bits_stored > bits_allocated {
            return Err(format!(
                "says Bits Stored is {bits_stored} with Bits Allocated {bits_allocated}; Bits Stored \
                 must be 1 to {bits_allocated} (PS3.3 C.7.6.3.1). Fix the header."
            ));
        }
        check_photometric(&photometric, samples)?;
        Ok(Layout {
            rows,
            columns,
            samples,
            frames,
            bits_allocated: bits_allocated as u16,
            bits_stored: bits_stored as u16,
            signed: representation == 1,
            planar,
            photometric,
        })
    }

    pub(super) fn bytes_per_sample(&self) -> usize {
        usize::from(self.bits_allocated / 8)
    }

    /// Bytes of one uncompressed frame; YBR_FULL_422 keeps two samples per pixel (PS3.3
    /// C.7.6.3.1.2: Y Y Cb Cr for each pair of pixels).
    pub(super) fn native_frame_bytes(&self) -> usize {
        let samples = if self.photometric == "YBR_FULL_422" { 2 } else { self.samples };
        self.rows * self.columns * samples * self.bytes_per_sample()
    }

    pub(super) fn decoded_frame_bytes(&self) -> usize {
        self.rows * self.columns * self.samples * self.bytes_per_sample()
    }
}

pub(super) fn check_photometric(photometric: &str, samples: usize) -> std::result::Result<(), Problem> {
    let expected = match photometric {
        "MONOCHROME1" | "MONOCHROME2" => 1,
        "RGB" | "YBR_FULL" | "YBR_FULL_422" | "YBR_ICT" | "YBR_RCT" => 3,
        other => {
            return Err(format!(
                "has the Photometric Interpretation {other}, which spurion does not convert yet \
                 (it reads MONOCHROME1, MONOCHROME2, RGB and YBR_FULL/YBR_FULL_422). Convert the \
                 file to RGB first (for example with gdcmconv)."
            ));
        }
    };
    if samples != expected {
        return Err(format!(
            "says {photometric} with {samples} samples per pixel; {photometric} has {expected} \
             (PS3.3 C.7.6.3.1.2). Fix the header."
        ));
    }
    Ok(())
}

// ---------------------------------------------------------------------------------------------
// Samples: decoding one frame into native-endian bytes and then into integers.

/// The colour space of decoded samples.
#[derive(Clone, Copy, PartialEq)]
pub(super) enum Colour {
    Gray,
    Rgb,
    YbrFull,
}

pub(super) fn frame_samples(
    obj: &DefaultDicomObject,
    ts: &TsFacts,
    layout: &Layout,
    frame: usize,
) -> std::result::Result<(Vec<u8>, Colour), Problem> {
    let colour = match layout.photometric.as_str() {
        "MONOCHROME1" | "MONOCHROME2" => Colour::Gray,
        _ if ts.decoder_gives_rgb => Colour::Rgb,
        "YBR_FULL" | "YBR_FULL_422" => Colour::YbrFull,
        _ => Colour::Rgb,
    };
    if layout.samples == 3 && colour == Colour::YbrFull && layout.bits_allocated != 8 {
        return Err(format!(
            "has {}-bit {} samples; spurion converts YBR to RGB for 8-bit samples only (as pydicom \
             does). Convert the file to RGB first.",
            layout.bits_allocated, layout.photometric
        ));
    }
    let bytes = if ts.encapsulated { decoded_frame(obj, ts, layout, frame)? } else { native_frame(obj, ts, layout, frame)? };
    let bytes = if layout.photometric == "YBR_FULL_422" && !ts.encapsulated { expand_422(&bytes, layout)? } else { bytes };
    let bytes = if layout.planar && !ts.encapsulated { interleave(&bytes, layout) } else { bytes };
    Ok((bytes, colour))
}

pub(super) fn native_frame(obj: &DefaultDicomObject, ts: &TsFacts, layout: &Layout, frame: usize) -> std::result::Result<Vec<u8>, Problem> {
    let element = obj.get(tags::PIXEL_DATA).ok_or("has no pixel data.")?;
    let value = element.value().primitive().ok_or(
        "has pixel data in encapsulated form under an uncompressed transfer syntax; the file is \
         inconsistent. Re-export it from its source.",
    )?;
    let all = native_bytes(value, ts.big_endian, layout.bytes_per_sample());
    let size = layout.native_frame_bytes();
    let want = size * layout.frames;
    if all.len() < want {
        return Err(format!(
            "is truncated: the pixel data holds {} of the {want} bytes that its Rows, Columns, \
             Samples per Pixel, Bits Allocated and Number of Frames call for. Copy the file again \
             from its source, or fix the header if it is wrong.",
            all.len()
        ));
    }
    Ok(all[frame * size..(frame + 1) * size].to_vec())
}

/// Pixel data bytes in native byte order. dicom-rs hands OB as file bytes and OW as 16-bit
/// words already in native order, so big endian files need the sample's bytes (OB) or its
/// 16-bit halves (OW holding 32-bit samples) put right.
pub(super) fn native_bytes(value: &PrimitiveValue, big_endian: bool, bytes_per_sample: usize) -> Vec<u8> {
    match value {
        PrimitiveValue::U8(bytes) if big_endian && bytes_per_sample > 1 => {
            bytes.chunks(bytes_per_sample).flat_map(|s| s.iter().rev().copied()).collect()
        }
        PrimitiveValue::U16(words) if big_endian && bytes_per_sample == 4 => words
            .chunks(2)
            .flat_map(|w| {
                let (high, low) = (u32::from(w[0]), u32::from(*w.get(1).unwrap_or(&0)));
                ((high << 16) | low).to_ne_bytes()
            })
            .collect(),
        other => other.to_bytes().into_owned(),
    }
}

pub(super) fn decoded_frame(obj: &DefaultDicomObject, ts: &TsFacts, layout: &Layout, frame: usize) -> std::result::Result<Vec<u8>, Problem> {
    // Limits of the decoders behind dicom-pixeldata 0.10 (jpeg-decoder takes 8-bit lossy
    // JPEG only; its RLE decoder takes 8 or 16 bits): said plainly instead of a decoder error.
    if ts.uid == uids::JPEG_EXTENDED12_BIT && layout.bits_stored > 8 {
        return Err(cannot_decode(ts.name, ts.uid, &format!(" with {}-bit samples", layout.bits_stored)));
    }
    if ts.uid == uids::RLE_LOSSLESS && layout.bits_allocated == 32 {
        return Err(cannot_decode(ts.name, ts.uid, " with 32 bits allocated"));
    }
    let decoded = obj.decode_pixel_data_frame(frame as u32).map_err(|e| {
        format!(
            "has {} pixel data that could not be decoded ({}). The file may be damaged; convert it \
             to an uncompressed transfer syntax with another tool (for example gdcmconv --raw) and \
             read that.",
            ts.name,
            chain(&e)
        )
    })?;
    let bytes = decoded.data();
    let want = layout.decoded_frame_bytes();
    if bytes.len() != want {
        return Err(format!(
            "has {} pixel data that decodes to {} bytes where Rows, Columns, Samples per Pixel and \
             Bits Allocated call for {want}. The header and the compressed data disagree; re-export \
             the file from its source.",
            ts.name,
            bytes.len()
        ));
    }
    Ok(bytes.to_vec())
}

/// YBR_FULL_422 (8-bit) to three samples per pixel: each pair of pixels shares its Cb and Cr
/// (PS3.3 C.7.6.3.1.2), copied to both as pydicom does.
pub(super) fn expand_422(bytes: &[u8], layout: &Layout) -> std::result::Result<Vec<u8>, Problem> {
    if !layout.columns.is_multiple_of(2) {
        return Err(format!("is YBR_FULL_422 with an odd number of columns ({}); PS3.3 C.7.6.3.1.2 requires it even.", layout.columns));
    }
    Ok(bytes.chunks_exact(4).flat_map(|q| [q[0], q[2], q[3], q[1], q[2], q[3]]).collect())
}

/// Planar Configuration 1 (RRR…GGG…BBB…) to interleaved RGBRGB…
pub(super) fn interleave(bytes: &[u8], layout: &Layout) -> Vec<u8> {
    let b = layout.bytes_per_sample();
    let plane = layout.rows * layout.columns * b;
    let mut out = Vec::with_capacity(bytes.len());
    for p in 0..layout.rows * layout.columns {
        for s in 0..layout.samples {
            let at = s * plane + p * b;
            out.extend_from_slice(&bytes[at..at + b]);
        }
    }
    out
}

/// Stored values as integers: only the low Bits Stored bits count, sign-extended when the
/// Pixel Representation says two's complement (PS3.5 8.1.1; pydicom 3 does the same shift,
/// which also repairs JPEG 2000 streams coded unsigned for signed images).
pub(super) fn interpret(bytes: &[u8], layout: &Layout) -> Vec<i64> {
    let bits = u32::from(layout.bits_stored);
    let mask: u64 = if bits == 64 { u64::MAX } else { (1u64 << bits) - 1 };
    let raw = |chunk: &[u8]| -> u64 {
        match chunk.len() {
            1 => u64::from(chunk[0]),
            2 => u64::from(u16::from_ne_bytes([chunk[0], chunk[1]])),
            _ => u64::from(u32::from_ne_bytes([chunk[0], chunk[1], chunk[2], chunk[3]])),
        }
    };
    bytes
        .chunks_exact(layout.bytes_per_sample())
        .map(|chunk| {
            let v = raw(chunk) & mask;
            if layout.signed && v >> (bits - 1) & 1 == 1 { v as i64 - (1i64 << bits) } else { v as i64 }
        })
        .collect()
}

// ---------------------------------------------------------------------------------------------
// Modality LUT (PS3.3 C.11.1) and colour.

pub(super) fn modality_lut(obj: &DefaultDicomObject, layout: &Layout) -> std::result::Result<ModalityLut, Problem> {
    if layout.samples != 1 {
        return Ok(ModalityLut::None);
    }
    if let Some(item) = first_item(obj, tags::MODALITY_LUT_SEQUENCE) {
        return lut_table(item, layout, "Modality LUT Sequence").map(ModalityLut::Table);
    }
    let slope = optional_float(obj, tags::RESCALE_SLOPE, "Rescale Slope")?;
    let intercept = optional_float(obj, tags::RESCALE_INTERCEPT, "Rescale Intercept")?;
    // pydicom rescales only when both are present; PS3.3 C.11.1 requires both together.
    Ok(match (slope, intercept) {
        (Some(slope), Some(intercept)) => ModalityLut::Rescale { slope, intercept },
        _ => ModalityLut::None,
    })
}

pub(super) fn to_values(samples: Vec<i64>, colour: Colour, layout: &Layout, lut: &ModalityLut) -> std::result::Result<Array3<f32>, Problem> {
    let shape = (layout.rows, layout.columns, layout.samples);
    let values: Vec<f32> = match (colour, lut) {
        (Colour::YbrFull, _) => ybr_full_to_rgb(&samples),
        (Colour::Rgb, _) | (Colour::Gray, ModalityLut::None) => samples.iter().map(|&v| v as f32).collect(),
        (Colour::Gray, ModalityLut::Rescale { slope, intercept }) => {
            samples.iter().map(|&v| (v as f64 * slope + intercept) as f32).collect()
        }
        (Colour::Gray, ModalityLut::Table(table)) => samples.iter().map(|&v| f32::from(table.lookup(v as f64))).collect(),
    };
    Array3::from_shape_vec(shape, values).map_err(|e| format!("could not be arranged as an image ({e})."))
}

/// YBR_FULL to RGB for 8-bit samples, PS3.3 C.7.6.3.1.2, in pydicom's arithmetic (f32 matrix,
/// round half up, clip to 0..255) so that both give the same bytes.
pub(super) fn ybr_full_to_rgb(samples: &[i64]) -> Vec<f32> {
    samples
        .chunks_exact(3)
        .flat_map(|p| {
            let (y, cb, cr) = (p[0] as f32, p[1] as f32 - 128.0, p[2] as f32 - 128.0);
            let r = y + 1.402 * cr;
            let g = y + (-0.114 * 1.772 / 0.587) * cb + (-0.299 * 1.402 / 0.587) * cr;
            let b = y + 1.772 * cb;
            [r, g, b].map(|v| (v + 0.5).floor().clamp(0.0, 255.0))
        })
        .collect()
}

/// The output range of the Modality LUT over all stored values (as pydicom's apply_windowing:
/// a table's bit depth, else the stored range rescaled).
pub(super) fn value_range(layout: &Layout, lut: &ModalityLut) -> (f64, f64) {
    let bits = i32::from(layout.bits_stored);
    let (low, high) = if layout.signed {
        (-(2f64.powi(bits - 1)), 2f64.powi(bits - 1) - 1.0)
    } else {
        (0.0, 2f64.powi(bits) - 1.0)
    };
    match lut {
        ModalityLut::Table(t) => (0.0, t.max_output()),
        ModalityLut::Rescale { slope, intercept } => {
            let (a, b) = (low * slope + intercept, high * slope + intercept);
            (a.min(b), a.max(b))
        }
        ModalityLut::None => (low, high),
    }
}

// ---------------------------------------------------------------------------------------------
// VOI LUT module (PS3.3 C.11.2).

pub(super) fn voi_info(obj: &DefaultDicomObject, layout: &Layout) -> std::result::Result<VoiLutInfo, Problem> {
    let centers = optional_floats(obj, tags::WINDOW_CENTER, "Window Center")?;
    let widths = optional_floats(obj, tags::WINDOW_WIDTH, "Window Width")?;
    let explanations: Vec<String> = obj
        .get(tags::WINDOW_CENTER_WIDTH_EXPLANATION)
        .and_then(|e| e.value().to_multi_str().ok().map(|v| v.iter().map(|s| s.trim().to_string()).collect()))
        .unwrap_or_default();
    // Pairs up to the shorter list: a centre without a width is no window.
    let windows = centers
        .iter()
        .zip(&widths)
        .enumerate()
        .map(|(i, (&center, &width))| WindowSetting { center, width, explanation: explanations.get(i).cloned() })
        .collect();
    let function = match text(obj, tags::VOILUT_FUNCTION) {
        None => Ok(VoiFunction::Linear),
        Some(t) => VoiFunction::from_dicom(&t).ok_or(t),
    };
    let tables = match obj.get(tags::VOILUT_SEQUENCE).and_then(|e| e.items()) {
        Some(items) => items.iter().map(|item| lut_table(item, layout, "VOI LUT Sequence")).collect::<std::result::Result<_, _>>()?,
        None => Vec::new(),
    };
    Ok(VoiLutInfo { windows, function, tables })
}

/// A LUT from a sequence item: LUT Descriptor (entries, first mapped, bits; PS3.3 C.11.1.1.1)
/// and LUT Data.
pub(super) fn lut_table(item: &InMemDicomObject, layout: &Layout, sequence: &str) -> std::result::Result<LutTable, Problem> {
    let descriptor: Vec<i64> = item
        .get(tags::LUT_DESCRIPTOR)
        .and_then(|e| e.to_multi_int::<i64>().ok())
        .filter(|d| d.len() == 3)
        .ok_or_else(|| format!("has a {sequence} item without a LUT Descriptor of three values. Fix the header."))?;
    // 0 entries means 65536; a first value read as US for a signed image is really SS.
    let entries = if descriptor[0] == 0 { 65536 } else { descriptor[0] as usize };
    let first_mapped = if layout.signed && descriptor[1] > 32767 { descriptor[1] - 65536 } else { descriptor[1] } as i32;
    let bits = u16::try_from(descriptor[2]).ok().filter(|b| (1..=16).contains(b)).ok_or_else(|| {
        format!("has a {sequence} item whose LUT Descriptor gives {} bits per entry; 8 to 16 are allowed.", descriptor[2])
    })?;
    let data = item
        .get(tags::LUT_DATA)
        .and_then(|e| e.value().primitive())
        .map(lut_entries)
        .ok_or_else(|| format!("has a {sequence} item without LUT Data. Fix the header."))?;
    if data.len() < entries {
        return Err(format!(
            "has a {sequence} item with {} LUT Data entries where its LUT Descriptor says {entries}. Fix the header.",
            data.len()
        ));
    }
    let explanation = item.get(tags::LUT_EXPLANATION).and_then(|e| e.to_str().ok()).map(|s| s.trim().to_string());
    Ok(LutTable { first_mapped, bits, data: data[..entries].to_vec(), explanation })
}

/// LUT Data as 16-bit entries: US/OW values come as words; bytes (OB, or OW left as bytes) are
/// read two at a time in the machine's order, which dicom-rs gives them in.
pub(super) fn lut_entries(value: &PrimitiveValue) -> Vec<u16> {
    match value {
        PrimitiveValue::U8(bytes) => bytes.chunks_exact(2).map(|b| u16::from_ne_bytes([b[0], b[1]])).collect(),
        PrimitiveValue::U16(words) => words.to_vec(),
        other => other.to_multi_int::<u16>().unwrap_or_default(),
    }
}

// ---------------------------------------------------------------------------------------------
