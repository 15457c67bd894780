//! Opening a file with or without preamble and file meta group, and the defects found before
//! decoding, each told as what is wrong and what to do.

use super::*;

// Opening: with or without preamble and file meta group.

/// Parses the file; `until` stops before that tag (to read only the header).
pub(super) fn open(bytes: &[u8], until: Option<Tag>) -> std::result::Result<DefaultDicomObject, String> {
    let options = || {
        let o = OpenFileOptions::new().read_preamble(ReadPreamble::Never);
        match until {
            Some(tag) => o.read_until(tag),
            None => o,
        }
    };
    let with_meta = if bytes.get(128..132) == Some(b"DICM") {
        Some(&bytes[128..])
    } else if bytes.starts_with(b"DICM") {
        Some(bytes)
    } else {
        None
    };
    if let Some(rest) = with_meta {
        return options().from_reader(rest).map_err(|e| chain(&e));
    }
    let ts_uid = sniff_encoding(bytes).ok_or_else(|| {
        "has neither the DICM marker of a DICOM file (PS3.10 7.1) nor a data set start spurion \
         recognises"
            .to_string()
    })?;
    let ts = TransferSyntaxRegistry.get(ts_uid).ok_or("has an encoding dicom-rs does not know")?;
    // dicom-rs reads a meta-less data set whole (it has no read_until for it): `until` is
    // for files with a meta group only.
    let obj = InMemDicomObject::read_dataset_with_ts(bytes, ts).map_err(|e| chain(&e))?;
    obj.with_meta(FileMetaTableBuilder::new().transfer_syntax(ts_uid)).map_err(|e| chain(&e))
}

/// The encoding of a data set without file meta group, from its first element: group 0008
/// (Identifying group, where such files start), little or big endian, explicit VR if a VR
/// stands at bytes 4..6. Implicit VR big endian does not exist (PS3.5 Annex A).
pub(super) fn sniff_encoding(bytes: &[u8]) -> Option<&'static str> {
    let head = bytes.get(0..8)?;
    let explicit = is_vr(&head[4..6]);
    let le_group = u16::from_le_bytes([head[0], head[1]]);
    let be_group = u16::from_be_bytes([head[0], head[1]]);
    if le_group == 0x0008 {
        if explicit {
            return Some(uids::EXPLICIT_VR_LITTLE_ENDIAN);
        }
        let length = u32::from_le_bytes([head[4], head[5], head[6], head[7]]);
        // Value lengths are even (PS3.5 7.1.1), or undefined for sequences.
        return (length % 2 == 0 || length == u32::MAX).then_some(uids::IMPLICIT_VR_LITTLE_ENDIAN);
    }
    // Retired (PS3.5 A.3) but still found in archives, so still read.
    #[allow(deprecated)]
    let big_endian = uids::EXPLICIT_VR_BIG_ENDIAN;
    (be_group == 0x0008 && explicit).then_some(big_endian)
}

pub(super) fn is_vr(code: &[u8]) -> bool {
    const VRS: &[&[u8; 2]] = &[
        b"AE", b"AS", b"AT", b"CS", b"DA", b"DS", b"DT", b"FD", b"FL", b"IS", b"LO", b"LT", b"OB",
        b"OD", b"OF", b"OL", b"OV", b"OW", b"PN", b"SH", b"SL", b"SQ", b"SS", b"ST", b"SV", b"TM",
        b"UC", b"UI", b"UL", b"UN", b"UR", b"US", b"UT", b"UV",
    ];
    VRS.iter().any(|vr| vr.as_slice() == code)
}

/// An error and its causes on one line.
pub(super) fn chain(e: &dyn std::error::Error) -> String {
    let mut text = e.to_string();
    let mut source = e.source();
    while let Some(cause) = source {
        text.push_str(": ");
        text.push_str(&cause.to_string());
        source = cause.source();
    }
    text
}

/// Explains a file that failed to parse.
pub(super) fn unreadable(bytes: &[u8], error: &str) -> Problem {
    let kind = kind_of(bytes);
    if error.contains("failed to fill whole buffer") {
        format!(
            "is truncated{kind}: it ends inside an attribute ({error}). Copy the file again from \
             its source (a partial download or a full disk cuts files short)."
        )
    } else {
        format!("is not a readable DICOM file{kind}: {error}. Check that it is DICOM and not damaged.")
    }
}

/// " (it is an RT Plan)" from as much of the header as parses: all of it, or group 0008.
pub(super) fn kind_of(bytes: &[u8]) -> String {
    let header = open(bytes, Some(tags::PIXEL_DATA)).or_else(|_| open(bytes, Some(Tag(0x0010, 0x0000))));
    header.ok().as_ref().and_then(sop_class_name).map(|k| format!(" ({k})")).unwrap_or_default()
}

/// What the header walk found wrong.
pub(super) enum Defect {
    Overrun(Overrun),
    /// Two bytes where an explicit VR must stand that are none (PS3.5 7.1.2).
    NoVr { tag: Tag, at: usize, bytes: [u8; 2] },
}

pub(super) fn defect_problem(bytes: &[u8], defect: &Defect) -> Problem {
    let again = "Copy the file again from its source (a partial download or a full disk cuts files short)";
    let o = match defect {
        Defect::Overrun(o) => o,
        Defect::NoVr { tag, at, bytes: vr } => {
            return format!(
                "is damaged{}: the attribute header at byte {at}, tag ({:04X},{:04X}), has no valid \
                 value representation (bytes {:02X} {:02X}). {again}; if the new copy is the same, \
                 the file is damaged or its transfer syntax is wrong.",
                kind_of(&bytes[..*at]),
                tag.group(),
                tag.element(),
                vr[0],
                vr[1]
            );
        }
    };
    if o.tag == tags::PIXEL_DATA {
        return format!("is truncated: the pixel data ends after {} of {} bytes. {again}.", o.present, o.declared);
    }
    // Only the bytes before the bad element are parsed, so its length allocates nothing.
    let kind = kind_of(&bytes[..o.at]);
    format!(
        "is truncated or damaged{kind}: attribute ({:04X},{:04X}) at byte {} says it holds {} bytes, \
         but the file has only {} left. {again}; if the new copy is the same, the file is damaged.",
        o.tag.group(),
        o.tag.element(),
        o.at,
        o.declared,
        o.present
    )
}

#[derive(Clone, Copy)]
pub(super) struct Encoding {
    pub(super) explicit: bool,
    pub(super) big: bool,
}

/// The file meta group is always explicit VR little endian (PS3.10 7.1).
pub(super) const META: Encoding = Encoding { explicit: true, big: false };

/// Value representations with a 4-byte length after 2 reserved bytes (PS3.5 7.1.2).
pub(super) const LONG_VRS: &[&[u8; 2]] = &[b"OB", b"OD", b"OF", b"OL", b"OV", b"OW", b"SQ", b"SV", b"UC", b"UN", b"UR", b"UT", b"UV"];

/// A value that claims more bytes than the file has left.
pub(super) struct Overrun {
    pub(super) tag: Tag,
    pub(super) at: usize,
    pub(super) declared: usize,
    pub(super) present: usize,
}

/// Walks the element headers (PS3.5 7.1, 7.5) without reading values, to find a length that
/// runs past the end of the file before dicom-rs allocates it: dicom-rs zero-fills the whole
/// claimed length, so one damaged 4-byte length would cost up to 4 GiB. Stops quietly (None)
/// where it cannot follow: a deflated data set, UN of undefined length.
pub(super) fn find_defect(bytes: &[u8]) -> Option<Defect> {
    let (mut pos, mut data) = if bytes.get(128..132) == Some(b"DICM") {
        (132, META)
    } else if bytes.starts_with(b"DICM") {
        (4, META)
    } else {
        let ts = sniff_encoding(bytes)?;
        (0, Encoding { explicit: ts != uids::IMPLICIT_VR_LITTLE_ENDIAN, big: ts.ends_with(".1.2.2") })
    };
    let mut in_fragments = false;
    while pos + 8 <= bytes.len() {
        let e = if bytes[pos..pos + 2] == [0x02, 0x00] { META } else { data };
        let u16_at = |at: usize| {
            let b = [bytes[at], bytes[at + 1]];
            if e.big { u16::from_be_bytes(b) } else { u16::from_le_bytes(b) }
        };
        let u32_at = |at: usize| {
            let b = [bytes[at], bytes[at + 1], bytes[at + 2], bytes[at + 3]];
            if e.big { u32::from_be_bytes(b) } else { u32::from_le_bytes(b) }
        };
        let tag = Tag(u16_at(pos), u16_at(pos + 2));
        if tag.group() == 0xFFFE {
            // Items and delimiters (PS3.5 7.5): walk into a sequence item, skip a fragment.
            let length = u32_at(pos + 4) as usize;
            pos += 8;
            match tag.element() {
                0xE000 if in_fragments => {
                    if length > bytes.len() - pos {
                        return Some(Defect::Overrun(Overrun { tag: tags::PIXEL_DATA, at: pos - 8, declared: length, present: bytes.len() - pos }));
                    }
                    pos += length;
                }
                0xE0DD => in_fragments = false,
                _ => {}
            }
            continue;
        }
        let (vr, length, header) = if e.explicit {
            let vr = &bytes[pos + 4..pos + 6];
            if !is_vr(vr) {
                return Some(Defect::NoVr { tag, at: pos, bytes: [vr[0], vr[1]] });
            }
            if LONG_VRS.iter().any(|v| v.as_slice() == vr) {
                if pos + 12 > bytes.len() {
                    return None;
                }
                (Some(vr), u32_at(pos + 8), 12)
            } else {
                (Some(vr), u32::from(u16_at(pos + 6)), 8)
            }
        } else {
            (None, u32_at(pos + 4), 8)
        };
        let at = pos;
        pos += header;
        if length == u32::MAX {
            // Undefined length: a sequence (walk its items) or encapsulated pixel data.
            match vr {
                Some(b"UN") => return None,
                Some(b"SQ") | None => {}
                Some(_) => in_fragments = true,
            }
            continue;
        }
        let (declared, present) = (length as usize, bytes.len() - pos);
        if declared > present {
            return Some(Defect::Overrun(Overrun { tag, at, declared, present }));
        }
        if tag == tags::TRANSFER_SYNTAX_UID {
            let uid = String::from_utf8_lossy(&bytes[pos..pos + declared]);
            data = match uid.trim_end_matches(['\0', ' ']) {
                uids::IMPLICIT_VR_LITTLE_ENDIAN => Encoding { explicit: false, big: false },
                "1.2.840.10008.1.2.2" => Encoding { explicit: true, big: true },
                "1.2.840.10008.1.2.1.99" => return None,
                _ => META,
            };
        }
        if vr != Some(b"SQ") {
            pos += declared;
        }
    }
    None
}

pub(super) fn no_pixel_data(obj: &DefaultDicomObject) -> Problem {
    let kind = sop_class_name(obj).map(|k| format!(" ({k}, which holds no image)")).unwrap_or_default();
    format!("has no pixel data{kind}. spurion reads images: open an image file of the study instead.")
}

/// "it is an RT Plan" from the SOP Class UID's standard name, or the modality.
pub(super) fn sop_class_name(obj: &DefaultDicomObject) -> Option<String> {
    let uid = text(obj, tags::SOP_CLASS_UID).unwrap_or_else(|| obj.meta().media_storage_sop_class_uid().to_string());
    let name = StandardSopClassDictionary
        .by_uid(uid.trim_end_matches('\0'))
        .map(|e| e.name().trim_end_matches(" Storage").to_string())
        .or_else(|| text(obj, tags::MODALITY).map(|m| format!("{m} object")))?;
    Some(format!("it is {} {name}", article(&name)))
}

/// "a" or "an" before a name whose first word may be spelled out letter by letter (RT, SR).
pub(super) fn article(name: &str) -> &'static str {
    let word = name.split(' ').next().unwrap_or("");
    let acronym = word.len() > 1 && word.chars().all(|c| c.is_ascii_uppercase());
    let first = word.chars().next().unwrap_or('x').to_ascii_uppercase();
    let vowel_sound = if acronym { "AEFHILMNORSX".contains(first) } else { "AEIOU".contains(first) };
    if vowel_sound { "an" } else { "a" }
}

