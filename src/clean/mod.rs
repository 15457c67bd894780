//! The cleaned copy: a dataset's chosen marks painted out with the fills removal uses, written
//! into a new folder with the same layout. The source folder is only read.
//!
//! - Which images and which regions: one or more [`Source`]s ([`select`]): a curator's ledger
//!   (verdicts and drawn regions), a sweep's rows above the user's limits (their found regions);
//!   regions are then kept by kind and confidence. An image picked by several sources gets the
//!   regions of all of them.
//! - Painting: on the file's own stored values ([`paint`]); PNG, TIFF, BMP and JPEG through
//!   [`raster`], DICOM through [`dicom`], which keeps the file a valid DICOM image.
//! - Every other file (images not picked, images with nothing to paint, files that are not
//!   images) is copied byte for byte.
//! - On disk ([`store`]): no partial file under a final name; a journal so a killed run goes on;
//!   at the end the manifest `spurion-clean.csv` (one line per picked image: regions, fill,
//!   pixels, hashes before and after, the settings id) and `spurion-clean.json` (the settings
//!   and counts). A run into a folder holding a cleaning made with other settings is refused.
//! - What the model does on the copy: [`check`].

pub mod check;
pub mod dicom;
mod paint;
pub mod raster;
pub mod select;
pub mod store;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Mutex;

use anyhow::{Context, Result, bail};
use rayon::prelude::*;
use serde::Serialize;
use serde_json::{Value, json};

use crate::control::Control;
use crate::feed::dicom::{is_dicom, read_stored};
use crate::feed::{OpenOptions, Picture, is_image_file};
use crate::regions::{FinderSettings, Region, RegionKind, find_border_bands, find_burned_in_marks};
use crate::sweep::{Exclude, Item};

pub use paint::union_mask;
pub use select::{LedgerRegions, LedgerSource, Limits, Source, SweepSource};
pub use store::{Action, Record};

/// A file with its regions painted out.
pub struct Cleaned {
    pub bytes: Vec<u8>,
    pub painted: usize,
    pub changed: usize,
    pub fill: String,
    pub note: String,
    pub burned_in_before: Option<bool>,
    pub burned_in_after: Option<bool>,
}

/// What to clean and where.
pub struct Job<'a> {
    /// The source folder (only read).
    pub images: PathBuf,
    /// The cleaned copy (created; or a cleaning of the same settings to go on with).
    pub out: PathBuf,
    /// Images never painted (copied as they are), as `spurion sweep --exclude`.
    pub exclude: Vec<String>,
    pub sources: Vec<&'a dyn Source>,
    /// The frame and window regions are found on (DICOM; the same as the sweep's).
    pub open: OpenOptions,
    /// The kinds of region painted out.
    pub kinds: Vec<RegionKind>,
    /// Regions found with less confidence are left.
    pub min_confidence: f32,
}

/// What a run did.
#[derive(Clone, Debug, Serialize)]
pub struct Outcome {
    pub settings_id: String,
    pub files: usize,
    pub cleaned: usize,
    pub picked_no_region: usize,
    pub copied: usize,
    /// Files found done in the journal of an earlier, stopped run.
    pub resumed: usize,
    pub pixels_changed: usize,
    /// Symbolic links in the source, not followed and not copied.
    pub links_skipped: usize,
    /// Each cleaned file's note, where it has one.
    pub notes: Vec<(String, String)>,
}

fn rel_of(root: &Path, p: &Path) -> String {
    p.strip_prefix(root).unwrap_or(p).components().map(|c| c.as_os_str().to_string_lossy().into_owned()).collect::<Vec<_>>().join("/")
}

/// Every regular file below `dir` (links are counted, not followed).
fn walk(dir: &Path, out: &mut Vec<PathBuf>, links: &mut usize) -> Result<()> {
    let rd = std::fs::read_dir(dir).with_context(|| format!("cannot list folder {}", dir.display()))?;
    let mut entries: Vec<PathBuf> = rd.filter_map(|e| e.ok().map(|e| e.path())).collect();
    entries.sort();
    for p in entries {
        let meta = std::fs::symlink_metadata(&p).with_context(|| format!("cannot read {}", p.display()))?;
        if meta.is_dir() {
            walk(&p, out, links)?;
        } else if meta.is_file() {
            out.push(p);
        } else if meta.file_type().is_symlink() {
            *links += 1;
        }
    }
    Ok(())
}

impl Job<'_> {
    /// The settings as one canonical JSON value; its hash is the settings id.
    pub fn settings(&self) -> Value {
        json!({
            "spurion": env!("CARGO_PKG_VERSION"),
            "images": select::same_file_key(&self.images),
            "exclude": self.exclude,
            "sources": self.sources.iter().map(|s| json!({ "name": s.name(), "settings": s.settings() })).collect::<Vec<_>>(),
            "frame": self.open.frame,
            "window": self.open.window,
            "kinds": self.kinds,
            "min_confidence": self.min_confidence,
        })
    }

    /// The regions of a picked image: each picking source's, kept by kind and confidence, each
    /// (label, box, mask) once.
    fn regions(&self, item: &Item, picture: &Picture, by: &[&dyn Source]) -> Result<Vec<Region>> {
        let mut out: Vec<Region> = vec![];
        for s in by {
            for r in s.regions(item, picture)? {
                if self.kinds.contains(&r.kind) && r.confidence >= self.min_confidence && !out.iter().any(|o| o.bbox == r.bbox && o.mask == r.mask) {
                    out.push(r);
                }
            }
        }
        Ok(out)
    }
}

fn check_folders(images: &Path, out: &Path) -> Result<()> {
    if !images.is_dir() {
        bail!("the images folder {} does not exist or is not a folder", images.display());
    }
    let src = select::same_file_key(images);
    let dst = select::same_file_key(out);
    if dst.starts_with(&src) || src.starts_with(&dst) {
        bail!(
            "the cleaned copy {} would lie inside the images folder {} (or hold it): choose an --out outside it; the source is never written",
            out.display(),
            images.display()
        );
    }
    for name in store::OWN_NAMES {
        if images.join(name).exists() {
            bail!("the images folder already holds {name}, a name the cleaned copy uses for itself: is it a cleaned copy? Clean its source instead");
        }
    }
    Ok(())
}

/// Whether a cleaning with `job`'s settings may write into `out`: it does not exist, is empty,
/// or holds a cleaning with exactly these settings (which a run then goes on with).
pub fn can_write_into(job: &Job<'_>, out: &Path) -> Result<bool> {
    if !out.exists() {
        return Ok(true);
    }
    let text = serde_json::to_string_pretty(&job.settings())?;
    match std::fs::read_to_string(out.join(store::STATE_DIR).join("settings.json")) {
        Ok(t) => Ok(t == text),
        Err(_) => Ok(std::fs::read_dir(out).with_context(|| format!("cannot list {}", out.display()))?.next().is_none()),
    }
}

/// Makes `out` ready: a new folder, or one holding a cleaning with exactly these settings.
fn prepare_out(out: &Path, settings_text: &str) -> Result<()> {
    let state = out.join(store::STATE_DIR);
    let settings_file = state.join("settings.json");
    if out.exists() {
        match std::fs::read_to_string(&settings_file) {
            Ok(t) if t == settings_text => return Ok(()),
            Ok(_) => bail!(
                "{} holds a cleaning made with other settings (or from a ledger or sweep that has changed since): choose another --out, \
                 or remove that folder to clean again",
                out.display()
            ),
            Err(_) => {
                let empty = std::fs::read_dir(out).with_context(|| format!("cannot list {}", out.display()))?.next().is_none();
                if !empty {
                    bail!("{} is not empty and holds no cleaning of spurion's: choose a new folder for --out", out.display());
                }
            }
        }
    }
    std::fs::create_dir_all(&state).with_context(|| format!("cannot create {} (check permissions or choose another --out)", state.display()))?;
    store::write_durably(&settings_file, settings_text.as_bytes()).with_context(|| format!("cannot write {}", settings_file.display()))
}

fn yes_no(v: Option<bool>) -> String {
    v.map(|b| if b { "YES" } else { "NO" }.to_string()).unwrap_or_default()
}

/// Whether the finders still find a burned-in mark on `picture` outside `painted`.
fn marks_remain(picture: &Picture, painted: &ndarray::Array2<bool>) -> bool {
    let finder = FinderSettings::default().for_picture(picture.burned_in_annotation());
    let lum = picture.luminance();
    let mut exclude = painted.clone();
    for b in find_border_bands(&lum, &finder.border) {
        exclude.zip_mut_with(&b.mask, |e, &m| *e |= m);
    }
    !find_burned_in_marks(&lum, Some(&exclude), &finder.mark).is_empty()
}

/// One file of the source, done.
fn do_file(job: &Job<'_>, settings_id: &str, src: &Path, dst: &Path, item: Option<&Item>) -> Result<Record> {
    let bytes = std::fs::read(src).with_context(|| format!("cannot read {}", src.display()))?;
    let before = store::sha256_hex(&bytes);
    let rel = rel_of(&job.images, src);
    let mut rec = Record {
        file: rel.clone(),
        action: Action::Copied,
        picked_by: String::new(),
        regions: String::new(),
        boxes: String::new(),
        fill: String::new(),
        pixels_painted: 0,
        pixels_changed: 0,
        sha256_before: before.clone(),
        sha256_after: before,
        burned_in_before: String::new(),
        burned_in_after: String::new(),
        note: String::new(),
        settings: settings_id.to_string(),
    };
    let picked: Vec<(&dyn Source, String)> = match item {
        Some(it) => job.sources.iter().filter_map(|s| s.picks(it).map(|why| (*s, why))).collect(),
        None => vec![],
    };
    let mut written = bytes;
    if let (Some(it), false) = (item, picked.is_empty()) {
        rec.picked_by = picked.iter().map(|(_, w)| w.as_str()).collect::<Vec<_>>().join("; ");
        rec.action = Action::PickedNoRegion;
        let picture = Picture::open_with(src, &job.open)?;
        rec.burned_in_before = yes_no(picture.burned_in_annotation());
        rec.burned_in_after = rec.burned_in_before.clone();
        let by: Vec<&dyn Source> = picked.iter().map(|(s, _)| *s).collect();
        let regions = job.regions(it, &picture, &by)?;
        if !regions.is_empty() {
            let painted = union_mask(&regions, picture.height(), picture.width());
            let cleaned = if is_dicom(&written) || it.path.extension().is_some_and(|e| e.eq_ignore_ascii_case("dcm")) {
                let stored = read_stored(src)?;
                if (stored.rows, stored.columns) != (picture.height(), picture.width()) {
                    bail!("{}: the stored image is {}×{} but the regions were found on {}×{}", rel, stored.columns, stored.rows, picture.width(), picture.height());
                }
                dicom::clean_dicom(stored, &regions, marks_remain(&picture, &painted), settings_id).with_context(|| format!("cleaning {}", src.display()))?
            } else {
                raster::clean_raster(&written, &regions).with_context(|| format!("cleaning {}", src.display()))?
            };
            rec.action = Action::Cleaned;
            rec.regions = regions.iter().map(Region::label).collect::<Vec<_>>().join("; ");
            rec.boxes = regions.iter().map(|r| format!("{} {} {} {}", r.bbox[0], r.bbox[1], r.bbox[2], r.bbox[3])).collect::<Vec<_>>().join("; ");
            rec.fill = cleaned.fill;
            rec.pixels_painted = cleaned.painted;
            rec.pixels_changed = cleaned.changed;
            rec.note = cleaned.note;
            if cleaned.burned_in_after.is_some() {
                rec.burned_in_before = yes_no(cleaned.burned_in_before);
                rec.burned_in_after = yes_no(cleaned.burned_in_after);
            }
            rec.sha256_after = store::sha256_hex(&cleaned.bytes);
            written = cleaned.bytes;
        }
    }
    if let Some(dir) = dst.parent() {
        std::fs::create_dir_all(dir).with_context(|| format!("cannot create folder {}", dir.display()))?;
    }
    store::write_durably(dst, &written).with_context(|| format!("cannot write {} (is the disk full?)", dst.display()))?;
    Ok(rec)
}

/// Cleans `job.images` into `job.out`, or goes on with a stopped run of the same settings.
/// One unit of progress per file; stops between files when cancelled (what is done stays
/// done).
pub fn run(job: &Job<'_>, ctl: &Control) -> Result<Outcome> {
    check_folders(&job.images, &job.out)?;
    let exclude = Exclude::new(&job.exclude)?;
    let settings = job.settings();
    let settings_text = serde_json::to_string_pretty(&settings)?;
    let settings_id = store::sha256_hex(settings_text.as_bytes())[..16].to_string();
    prepare_out(&job.out, &settings_text)?;
    let done = store::Journal::read(&job.out)?;
    let mut files = vec![];
    let mut links = 0;
    walk(&job.images, &mut files, &mut links)?;
    let todo: Vec<&PathBuf> = files
        .iter()
        .filter(|p| {
            let rel = rel_of(&job.images, p);
            !(done.contains_key(&rel) && job.out.join(&rel).is_file())
        })
        .collect();
    let resumed = files.len() - todo.len();
    ctl.begin(files.len() as u64);
    ctl.advance(resumed as u64);
    let journal = Mutex::new(store::Journal::open(&job.out)?);
    todo.par_iter().try_for_each(|src| -> Result<()> {
        ctl.check()?;
        let rel = rel_of(&job.images, src);
        let dst = rel.split('/').fold(job.out.clone(), |p, part| p.join(part));
        let item = (is_image_file(src) && !exclude.excludes(&rel)).then(|| Item { rel: rel.clone(), path: (*src).clone(), group: String::new() });
        let rec = do_file(job, &settings_id, src, &dst, item.as_ref())?;
        journal.lock().map_err(|_| anyhow::anyhow!("the journal's lock was poisoned"))?.append(&rec)?;
        ctl.advance(1);
        Ok(())
    })?;
    let records = store::Journal::read(&job.out)?;
    let count = |a: Action| records.values().filter(|r| r.action == a).count();
    let outcome = Outcome {
        settings_id: settings_id.clone(),
        files: files.len(),
        cleaned: count(Action::Cleaned),
        picked_no_region: count(Action::PickedNoRegion),
        copied: count(Action::Copied),
        resumed,
        pixels_changed: records.values().map(|r| r.pixels_changed).sum(),
        links_skipped: links,
        notes: records.values().filter(|r| !r.note.is_empty()).map(|r| (r.file.clone(), r.note.clone())).collect(),
    };
    store::write_durably(&job.out.join(store::MANIFEST), &store::manifest_csv(&records)?)
        .with_context(|| format!("cannot write the manifest in {}", job.out.display()))?;
    let summary = json!({
        "format": "spurion-clean",
        "version": 1,
        "settings_id": settings_id,
        "settings": settings,
        "outcome": outcome,
        "caution": crate::CAUTION,
    });
    store::write_durably(&job.out.join(store::SUMMARY), serde_json::to_string_pretty(&summary)?.as_bytes())
        .with_context(|| format!("cannot write the summary in {}", job.out.display()))?;
    Ok(outcome)
}

/// The records of a finished cleaning in `out`, by file.
pub fn records(out: &Path) -> Result<BTreeMap<String, Record>> {
    store::Journal::read(out)
}
