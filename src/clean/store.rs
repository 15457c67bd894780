//! The cleaned copy on disk: every file written as databases write a commit (a temporary file
//! in the same folder, synced, renamed over the final name, the folder synced), so no partial
//! file ever stands under a final name; a journal of what is done, one synced line per file,
//! so a killed run goes on where it stopped; and the manifest written from the journal at the
//! end.

use std::collections::BTreeMap;
use std::fs::{File, OpenOptions};
use std::io::{self, Write};
use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

/// The folder inside the cleaned copy that holds the run's settings and journal.
pub const STATE_DIR: &str = ".spurion-clean";
/// The manifest: one line per image picked for cleaning.
pub const MANIFEST: &str = "spurion-clean.csv";
/// The run's settings and counts.
pub const SUMMARY: &str = "spurion-clean.json";
/// What the model does on the cleaned copy (`spurion clean --check`).
pub const CHECK_JSON: &str = "spurion-check.json";
pub const CHECK_TEXT: &str = "spurion-check.txt";
/// The names spurion writes at the top of the cleaned copy, which the source may not use.
pub const OWN_NAMES: &[&str] = &[STATE_DIR, MANIFEST, SUMMARY, CHECK_JSON, CHECK_TEXT];

/// What happened to one file.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Action {
    /// Regions were painted out.
    Cleaned,
    /// Picked, but no region of the kinds asked for was there: copied as it is.
    PickedNoRegion,
    /// Not picked (or not an image): copied as it is.
    Copied,
}

/// One file of the copy, as the journal and the manifest hold it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Record {
    /// Relative to the images folder, `/` between parts.
    pub file: String,
    pub action: Action,
    /// Which sources picked it and why, joined by `; `.
    pub picked_by: String,
    /// The regions painted out: their labels, joined by `; `.
    pub regions: String,
    /// Their boxes, `x0 y0 x1 y1` (end exclusive), joined by `; `.
    pub boxes: String,
    pub fill: String,
    /// Pixels under the regions, and of those the ones whose value changed.
    pub pixels_painted: usize,
    pub pixels_changed: usize,
    pub sha256_before: String,
    pub sha256_after: String,
    /// DICOM's Burned In Annotation before and after (YES, NO, or empty).
    pub burned_in_before: String,
    pub burned_in_after: String,
    /// Anything else about the file: a transfer syntax or photometric change, lossy JPEG.
    pub note: String,
    /// The run's settings id (the settings themselves are in `spurion-clean.json`).
    pub settings: String,
}

pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes).iter().map(|b| format!("{b:02x}")).collect()
}

fn folder_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// The one temporary file of `path`: `.NAME.spurion-tmp` beside it. A run writes each file
/// once, so one name is enough, and what a killed run left there is replaced on resume.
pub fn temp_path(path: &Path) -> PathBuf {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    path.with_file_name(format!(".{name}.spurion-tmp"))
}

/// Puts `bytes` under `path` durably: the temporary file written and synced, renamed over
/// `path`, the folder synced.
pub fn write_durably(path: &Path, bytes: &[u8]) -> io::Result<()> {
    let tmp = temp_path(path);
    match std::fs::remove_file(&tmp) {
        Err(e) if e.kind() != io::ErrorKind::NotFound => return Err(e),
        _ => {}
    }
    let mut f = OpenOptions::new().write(true).create_new(true).open(&tmp)?;
    let written = f.write_all(bytes).and_then(|()| f.sync_all());
    drop(f);
    if let Err(e) = written.and_then(|()| std::fs::rename(&tmp, path)) {
        std::fs::remove_file(&tmp).ok();
        return Err(e);
    }
    File::open(folder_of(path))?.sync_all()
}

/// The journal: one JSON line per finished file, appended and synced.
pub struct Journal {
    file: File,
}

impl Journal {
    pub fn path(out: &Path) -> PathBuf {
        out.join(STATE_DIR).join("journal.jsonl")
    }

    /// The records of the journal in `out` (none when there is none). A last line cut short by
    /// a kill is dropped: its file is done again.
    pub fn read(out: &Path) -> Result<BTreeMap<String, Record>> {
        let p = Self::path(out);
        let text = match std::fs::read_to_string(&p) {
            Ok(t) => t,
            Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(BTreeMap::new()),
            Err(e) => return Err(e).with_context(|| format!("cannot read the journal {}", p.display())),
        };
        let mut m = BTreeMap::new();
        for line in text.lines() {
            if let Ok(r) = serde_json::from_str::<Record>(line) {
                m.insert(r.file.clone(), r);
            }
        }
        Ok(m)
    }

    pub fn open(out: &Path) -> Result<Journal> {
        let p = Self::path(out);
        // A line cut short by a kill must not glue onto the next one.
        let needs_newline = std::fs::read(&p).map(|b| !b.is_empty() && b.last() != Some(&b'\n')).unwrap_or(false);
        let mut file = OpenOptions::new().create(true).append(true).open(&p).with_context(|| format!("cannot open the journal {}", p.display()))?;
        if needs_newline {
            file.write_all(b"\n")?;
        }
        Ok(Journal { file })
    }

    pub fn append(&mut self, r: &Record) -> Result<()> {
        let mut line = serde_json::to_string(r)?;
        line.push('\n');
        self.file.write_all(line.as_bytes()).and_then(|()| self.file.sync_data()).context("cannot write the cleaning journal (is the disk full?)")
    }
}

/// The manifest's CSV text: the records of the picked images, sorted by file.
pub fn manifest_csv(records: &BTreeMap<String, Record>) -> Result<Vec<u8>> {
    let mut w = csv::Writer::from_writer(vec![]);
    for r in records.values().filter(|r| r.action != Action::Copied) {
        w.serialize(r)?;
    }
    // A manifest with no row still names its columns.
    if records.values().all(|r| r.action == Action::Copied) {
        w.write_record(MANIFEST_COLUMNS)?;
    }
    Ok(w.into_inner()?)
}

/// The manifest's columns, in order.
pub const MANIFEST_COLUMNS: &[&str] = &[
    "file",
    "action",
    "picked_by",
    "regions",
    "boxes",
    "fill",
    "pixels_painted",
    "pixels_changed",
    "sha256_before",
    "sha256_after",
    "burned_in_before",
    "burned_in_after",
    "note",
    "settings",
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_journal_cut_short_keeps_its_whole_lines() {
        let dir = tempfile::tempdir().unwrap();
        std::fs::create_dir_all(dir.path().join(STATE_DIR)).unwrap();
        let rec = |f: &str| Record {
            file: f.into(),
            action: Action::Copied,
            picked_by: String::new(),
            regions: String::new(),
            boxes: String::new(),
            fill: String::new(),
            pixels_painted: 0,
            pixels_changed: 0,
            sha256_before: "aa".into(),
            sha256_after: "aa".into(),
            burned_in_before: String::new(),
            burned_in_after: String::new(),
            note: String::new(),
            settings: "s".into(),
        };
        let mut j = Journal::open(dir.path()).unwrap();
        j.append(&rec("a.png")).unwrap();
        drop(j);
        // A kill in the middle of the next line.
        let p = Journal::path(dir.path());
        let mut t = std::fs::read_to_string(&p).unwrap();
        t.push_str("{\"file\":\"b.p");
        std::fs::write(&p, t).unwrap();
        assert_eq!(Journal::read(dir.path()).unwrap().keys().collect::<Vec<_>>(), ["a.png"]);
        let mut j = Journal::open(dir.path()).unwrap();
        j.append(&rec("c.png")).unwrap();
        assert_eq!(Journal::read(dir.path()).unwrap().keys().collect::<Vec<_>>(), ["a.png", "c.png"]);
        // The manifest of copies only still has its header; its columns are the record's.
        let text = String::from_utf8(manifest_csv(&Journal::read(dir.path()).unwrap()).unwrap()).unwrap();
        assert_eq!(text.trim(), MANIFEST_COLUMNS.join(","));
        let mut w = csv::Writer::from_writer(vec![]);
        w.serialize(rec("x")).unwrap();
        let t = String::from_utf8(w.into_inner().unwrap()).unwrap();
        assert_eq!(t.lines().next().unwrap(), MANIFEST_COLUMNS.join(","));
    }

    #[test]
    fn a_durable_write_leaves_no_temporary_file() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("x.png");
        std::fs::write(temp_path(&p), b"left by a killed run").unwrap();
        write_durably(&p, b"new").unwrap();
        assert_eq!(std::fs::read(&p).unwrap(), b"new");
        assert!(!temp_path(&p).exists());
    }
}
