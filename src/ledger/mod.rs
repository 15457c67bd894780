//! The ledger: a curator's verdicts, notes and drawn regions, image by image, in one file per
//! dataset that no crash or kill can damage.
//!
//! # File (`spurion-ledger.json` by default; spurion's own format)
//!
//! ```json
//! {
//!   "format": "spurion-ledger",
//!   "version": 1,
//!   "root": ".",
//!   "images": {
//!     "hillmoor/0005.png": {
//!       "verdict": "marked",
//!       "note": "tag in the top-left corner",
//!       "drawn": [{ "label": "tag", "shape": "rect", "box": [4, 4, 30, 16] }],
//!       "image_size": [128, 128],
//!       "changed": "2026-05-03T10:11:12.345Z"
//!     }
//!   }
//! }
//! ```
//!
//! - `root` is the dataset's folder: relative to the ledger file's own folder (`"."`, the
//!   default, is that folder), or absolute. It is fixed when the ledger is made.
//! - `images` is keyed by each image's path relative to the root, with `/` between folders, as
//!   a sweep names them: the same key whatever folder a command was run from.
//! - `verdict` is `clean`, `marked` (carries a spurious mark), `unsure` or `exclude`; absent when
//!   none is given. `note` is free text. `drawn` holds drawn regions in the shapes of
//!   `*.drawn.json` ([`crate::regions::drawn`]), with `image_size` (`[width, height]`) of the image
//!   they were drawn on. `changed` is when the entry last changed (UTC, RFC 3339).
//! - An entry with no verdict, no note and no drawn region is not kept.
//!
//! A newer `version` or a file that does not parse is refused with an error naming it and is
//! never written over. Writing is in [`file`]: under a lock, re-read, change, write a temporary
//! file in the same folder, sync it, rename it over the ledger, sync the folder.
//!
//! # Use
//!
//! - Reading (a sweep, `explain --ledger`): [`Ledger::open`] (no lock needed: a reader sees
//!   one whole version of the file), [`Ledger::key_for`] for an image's path, then
//!   [`Ledger::verdict`], [`Ledger::is_excluded`] and [`Ledger::drawn_regions_for`] (regions of
//!   kind drawn region on the image's grid, to add to the found ones).
//! - One change from a command: [`commit`] with a closure that applies [`Change`]s.
//! - A window: [`BackgroundStore::spawn`] over a [`Store`]; [`BackgroundStore::change`] shows
//!   at once and never waits on the disk, [`BackgroundStore::poll`] each frame,
//!   [`BackgroundStore::status`] for what is unsaved and why, [`BackgroundStore::close`] on exit.

mod change;
mod export;
pub mod file;
mod key;
mod stamp;
mod store;
mod worker;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use serde::{Deserialize, Serialize};

use crate::regions::drawn::{DrawnFile, DrawnShape};
use crate::regions::Region;

pub use change::{Change, Edit};
pub use export::{CsvRow, Import, Prefer, import_rows, read_csv, write_csv};
pub use file::{DiskWriter, SaveError, Writer, commit, load, replace_locked, write_durably};
pub use stamp::Stamp;
pub use store::{Store, Unsaved};
pub use worker::{BackgroundStore, Status};

/// The `format` every ledger file names.
pub const FORMAT: &str = "spurion-ledger";
/// The version this spurion writes and the newest it reads.
pub const VERSION: u32 = 1;
/// The ledger's file name when only a folder is given.
pub const DEFAULT_NAME: &str = "spurion-ledger.json";

/// A curator's verdict on one image.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Verdict {
    /// No spurious mark.
    Clean,
    /// Carries a spurious mark.
    Marked,
    /// Not decided.
    Unsure,
    /// Left out of sweeps and training.
    Exclude,
}

impl Verdict {
    /// In the order of their keys, 1 to 4.
    pub const ALL: [Verdict; 4] = [Verdict::Clean, Verdict::Marked, Verdict::Unsure, Verdict::Exclude];

    pub fn name(self) -> &'static str {
        match self {
            Verdict::Clean => "clean",
            Verdict::Marked => "marked",
            Verdict::Unsure => "unsure",
            Verdict::Exclude => "exclude",
        }
    }

    /// The keyboard key of this verdict in the inspector, 1 to 4.
    pub fn key(self) -> u8 {
        Verdict::ALL.iter().position(|v| *v == self).map_or(0, |i| i as u8 + 1)
    }

    /// The verdict of keyboard key 1 to 4.
    pub fn from_key(key: u8) -> Option<Verdict> {
        Verdict::ALL.get((key as usize).checked_sub(1)?).copied()
    }

    /// A name (or its key, 1 to 4); `none` or an empty text is no verdict.
    pub fn parse(s: &str) -> Result<Option<Verdict>> {
        let t = s.trim().to_ascii_lowercase();
        if t.is_empty() || t == "none" {
            return Ok(None);
        }
        if let Some(v) = Verdict::ALL.iter().find(|v| v.name() == t) {
            return Ok(Some(*v));
        }
        if let Some(v) = t.parse::<u8>().ok().and_then(Verdict::from_key) {
            return Ok(Some(v));
        }
        bail!("unknown verdict \"{s}\"; use clean, marked, unsure, exclude (or 1 to 4), or none")
    }
}

impl std::fmt::Display for Verdict {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.name())
    }
}

/// What the ledger holds on one image.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Entry {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub verdict: Option<Verdict>,
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub note: String,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub drawn: Vec<DrawnShape>,
    /// `[width, height]` of the image the regions were drawn on.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub image_size: Option<[usize; 2]>,
    pub changed: Stamp,
}

impl Entry {
    /// An entry with nothing in it, changed at `at`.
    pub fn empty(at: Stamp) -> Entry {
        Entry { verdict: None, note: String::new(), drawn: Vec::new(), image_size: None, changed: at }
    }

    /// Nothing to keep: no verdict, no note, no drawn region.
    pub fn is_empty(&self) -> bool {
        self.verdict.is_none() && self.note.is_empty() && self.drawn.is_empty()
    }

    /// The same content, ignoring when it changed.
    pub fn same_content(&self, other: &Entry) -> bool {
        Entry { changed: other.changed, ..self.clone() } == *other
    }

    /// The drawn regions on an image of `height`×`width`; an error when they were drawn on an
    /// image of another size, or a shape covers no pixel of this one.
    pub fn drawn_regions(&self, height: usize, width: usize) -> Result<Vec<Region>> {
        DrawnFile::new(self.image_size, self.drawn.clone()).to_regions(height, width)
    }
}

/// Verdict counts, for summaries.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Counts {
    pub images: usize,
    pub clean: usize,
    pub marked: usize,
    pub unsure: usize,
    pub exclude: usize,
    pub no_verdict: usize,
    pub with_drawn_regions: usize,
}

/// A ledger in memory: where its file is, the dataset's root and the entries.
#[derive(Clone, Debug, PartialEq)]
pub struct Ledger {
    path: PathBuf,
    root: String,
    images: BTreeMap<String, Entry>,
}

/// The on-disk form, as read (written by [`Ledger::to_json`]).
#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct Stored {
    // Checked on the raw JSON before this typed read, so that a newer version is told as such.
    #[allow(dead_code)]
    pub format: String,
    #[allow(dead_code)]
    pub version: u32,
    pub root: String,
    pub images: BTreeMap<String, Entry>,
}

impl Ledger {
    /// An empty ledger for the file `path`, its root `root` (absolute, or relative to the
    /// ledger's folder; `None`: the ledger's folder).
    pub fn new(path: &Path, root: Option<&Path>) -> Result<Ledger> {
        let root = match root {
            None => ".".to_string(),
            Some(r) => key::root_text(path, r)?,
        };
        Ok(Ledger { path: path.to_path_buf(), root, images: BTreeMap::new() })
    }

    /// The ledger file a path names: the path itself, or `DIR/spurion-ledger.json` for a folder.
    pub fn file_for(path: &Path) -> PathBuf {
        if path.is_dir() { path.join(DEFAULT_NAME) } else { path.to_path_buf() }
    }

    /// Reads the ledger at `path`; an error when there is none (see [`load`] to tell).
    pub fn open(path: &Path) -> Result<Ledger> {
        load(path)?.with_context(|| {
            format!("there is no ledger at {}; `spurion ledger set` makes one, or check the path", path.display())
        })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The root as the file records it.
    pub fn root_text(&self) -> &str {
        &self.root
    }

    /// The dataset's folder, the one image keys are relative to.
    pub fn root_dir(&self) -> PathBuf {
        key::root_dir(&self.path, &self.root)
    }

    /// The key of an image: its path relative to the root, with `/`. `image` may be absolute
    /// or relative to the current folder; a relative path that does not lead into the root
    /// from there is taken as relative to the root.
    pub fn key_for(&self, image: &Path) -> Result<String> {
        key::key_for(&self.root_dir(), image).with_context(|| format!("ledger {}", self.path.display()))
    }

    /// The path of an image from its key.
    pub fn image_path(&self, key: &str) -> PathBuf {
        key.split('/').fold(self.root_dir(), |p, part| p.join(part))
    }

    pub fn entry(&self, key: &str) -> Option<&Entry> {
        self.images.get(key)
    }

    /// The entries, sorted by key.
    pub fn entries(&self) -> impl Iterator<Item = (&String, &Entry)> {
        self.images.iter()
    }

    pub fn len(&self) -> usize {
        self.images.len()
    }

    pub fn is_empty(&self) -> bool {
        self.images.is_empty()
    }

    /// The verdict on an image (by key), if any.
    pub fn verdict(&self, key: &str) -> Option<Verdict> {
        self.images.get(key).and_then(|e| e.verdict)
    }

    /// Whether the curator excluded this image (a sweep may leave it out).
    pub fn is_excluded(&self, key: &str) -> bool {
        self.verdict(key) == Some(Verdict::Exclude)
    }

    /// The drawn regions of an image (by key) on its `height`×`width` grid, ready for the
    /// figures, the removal and the flag like found regions; empty when it has none.
    pub fn drawn_regions_for(&self, key: &str, height: usize, width: usize) -> Result<Vec<Region>> {
        match self.images.get(key) {
            Some(e) if !e.drawn.is_empty() => e.drawn_regions(height, width).with_context(|| {
                format!("the drawn regions of {key} in ledger {}", self.path.display())
            }),
            _ => Ok(Vec::new()),
        }
    }

    /// How many images have each verdict.
    pub fn counts(&self) -> Counts {
        let mut c = Counts { images: self.images.len(), ..Counts::default() };
        for e in self.images.values() {
            match e.verdict {
                Some(Verdict::Clean) => c.clean += 1,
                Some(Verdict::Marked) => c.marked += 1,
                Some(Verdict::Unsure) => c.unsure += 1,
                Some(Verdict::Exclude) => c.exclude += 1,
                None => c.no_verdict += 1,
            }
            c.with_drawn_regions += !e.drawn.is_empty() as usize;
        }
        c
    }

    /// Applies one change in memory.
    pub fn apply(&mut self, change: &Change) {
        let slot = self.images.entry(change.image.clone()).or_insert_with(|| Entry::empty(change.at));
        change.edit.apply_to(slot, change.at);
        if slot.is_empty() {
            self.images.remove(&change.image);
        }
    }

    /// Puts a whole entry (an empty one removes the image).
    pub(crate) fn put(&mut self, key: String, entry: Entry) {
        if entry.is_empty() {
            self.images.remove(&key);
        } else {
            self.images.insert(key, entry);
        }
    }

    /// The same entries for a ledger file at `path`: the root is kept pointing at the same
    /// folder (written absolute unless the new file sits in the same folder).
    pub fn moved_to(&self, path: &Path) -> Result<Ledger> {
        let same_folder = key::folder_of(path) == key::folder_of(&self.path);
        let root = if same_folder { self.root.clone() } else { key::root_text(path, &key::absolute(&self.root_dir())?)? };
        Ok(Ledger { path: path.to_path_buf(), root, images: self.images.clone() })
    }

    /// The file's text: JSON with one line per image, sorted by key, so a change to an image
    /// is a change to one line (for people reading it and for version control).
    pub fn to_json(&self) -> Result<String> {
        let mut t = format!(
            "{{\n  \"format\": {},\n  \"version\": {VERSION},\n  \"root\": {},\n  \"images\": {{",
            serde_json::to_string(FORMAT)?,
            serde_json::to_string(&self.root)?
        );
        for (i, (k, e)) in self.images.iter().enumerate() {
            t.push_str(if i == 0 { "\n    " } else { ",\n    " });
            t.push_str(&serde_json::to_string(k)?);
            t.push_str(": ");
            t.push_str(&serde_json::to_string(e)?);
        }
        t.push_str(if self.images.is_empty() { "}\n}\n" } else { "\n  }\n}\n" });
        Ok(t)
    }

    /// A ledger from a file's text; errors name `path` and say what to do.
    pub fn from_json(path: &Path, text: &str) -> Result<Ledger> {
        file::parse(path, text)
    }

    pub(crate) fn from_stored(path: &Path, s: Stored) -> Ledger {
        Ledger { path: path.to_path_buf(), root: s.root, images: s.images }
    }
}

#[cfg(test)]
mod tests;
