//! Which images get cleaned and which of their regions are painted out: one [`Source`] per kind
//! of evidence. A curator's ledger ([`LedgerSource`]: verdicts and drawn regions) and a sweep
//! ([`SweepSource`]: its rows above the limits the user sets, their found regions) are the two
//! here; another kind (a sweep's hotspots, say) plugs in by implementing [`Source`].

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};
use sha2::{Digest, Sha256};

use crate::feed::{OpenOptions, Picture};
use crate::ledger::{Ledger, Verdict};
use crate::regions::{FinderSettings, Region, find_regions};
use crate::sweep::{Item, Row};

/// A source of marks to paint out.
pub trait Source: Sync {
    /// Short name for the manifest: "ledger", "sweep".
    fn name(&self) -> &'static str;
    /// Everything that decides what this source picks, as JSON: part of the run's settings, so
    /// that a run is resumed only with the same choices (a changed ledger or sweep included).
    fn settings(&self) -> Value;
    /// Whether the image is picked, and why (a short text for the manifest).
    fn picks(&self, item: &Item) -> Option<String>;
    /// The regions to paint out of a picked image, on the picture's grid.
    fn regions(&self, item: &Item, picture: &Picture) -> Result<Vec<Region>>;
}

/// The path of a file in a form two spellings of it share (absolute, `.`/`..` resolved through
/// the file system where it exists).
pub fn same_file_key(p: &Path) -> PathBuf {
    std::fs::canonicalize(p).unwrap_or_else(|_| std::path::absolute(p).unwrap_or_else(|_| p.to_path_buf()))
}

fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes).iter().map(|b| format!("{b:02x}")).collect()
}

/// Which regions of a ledger's picked images are painted out.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum LedgerRegions {
    /// The drawn regions; an image with none gets the finders' regions instead.
    DrawnElseFound,
    /// Only the drawn regions (an image with none is copied unchanged).
    Drawn,
    /// Only the finders' regions.
    Found,
    /// Both.
    Both,
}

impl LedgerRegions {
    pub const NAMES: &'static [&'static str] = &["drawn-else-found", "drawn", "found", "both"];

    pub fn parse(s: &str) -> Result<LedgerRegions> {
        Ok(match s.trim() {
            "drawn-else-found" => LedgerRegions::DrawnElseFound,
            "drawn" => LedgerRegions::Drawn,
            "found" => LedgerRegions::Found,
            "both" => LedgerRegions::Both,
            other => bail!("unknown ledger regions '{other}': use one of {}", Self::NAMES.join(", ")),
        })
    }
}

/// The finders' regions on a picture, told of its own Burned In Annotation, as explain and the
/// sweep find them.
fn found(picture: &Picture, finder: &FinderSettings) -> Vec<Region> {
    find_regions(&picture.luminance(), &finder.for_picture(picture.burned_in_annotation()))
}

/// A curator's ledger: the images with one of `verdicts` (by default `marked`), and their
/// drawn and/or found regions.
pub struct LedgerSource {
    ledger: Ledger,
    verdicts: Vec<Verdict>,
    regions: LedgerRegions,
    finder: FinderSettings,
    content_hash: String,
}

impl LedgerSource {
    pub fn open(path: &Path, verdicts: Vec<Verdict>, regions: LedgerRegions, finder: FinderSettings) -> Result<LedgerSource> {
        let file = Ledger::file_for(path);
        let ledger = Ledger::open(&file)?;
        let text = std::fs::read(&file).with_context(|| format!("cannot read the ledger {}", file.display()))?;
        if verdicts.is_empty() {
            bail!("no verdict to pick images by: give at least one (e.g. marked)");
        }
        Ok(LedgerSource { ledger, verdicts, regions, finder, content_hash: sha256_hex(&text) })
    }

    fn entry(&self, item: &Item) -> Option<&crate::ledger::Entry> {
        let key = self.ledger.key_for(&item.path).ok()?;
        self.ledger.entry(&key)
    }
}

impl Source for LedgerSource {
    fn name(&self) -> &'static str {
        "ledger"
    }

    fn settings(&self) -> Value {
        json!({
            "ledger": same_file_key(self.ledger.path()),
            "ledger_sha256": self.content_hash,
            "verdicts": self.verdicts,
            "regions": self.regions,
            "finder": self.finder,
        })
    }

    fn picks(&self, item: &Item) -> Option<String> {
        let v = self.entry(item)?.verdict?;
        self.verdicts.contains(&v).then(|| format!("ledger verdict {v}"))
    }

    fn regions(&self, item: &Item, picture: &Picture) -> Result<Vec<Region>> {
        let Some(entry) = self.entry(item) else { return Ok(vec![]) };
        let (h, w) = (picture.height(), picture.width());
        let drawn = if entry.drawn.is_empty() {
            vec![]
        } else {
            entry.drawn_regions(h, w).with_context(|| format!("the regions drawn on {} in ledger {}", item.rel, self.ledger.path().display()))?
        };
        Ok(match self.regions {
            LedgerRegions::Drawn => drawn,
            LedgerRegions::Found => found(picture, &self.finder),
            LedgerRegions::Both => drawn.into_iter().chain(found(picture, &self.finder)).collect(),
            LedgerRegions::DrawnElseFound if drawn.is_empty() => found(picture, &self.finder),
            LedgerRegions::DrawnElseFound => drawn,
        })
    }
}

/// The limits a sweep's row must pass to be picked. Every limit given must hold; with none
/// given, the rows the sweep flagged suspect are picked.
#[derive(Clone, Debug, Default, PartialEq, Serialize, Deserialize)]
pub struct Limits {
    /// Only rows the sweep flagged suspect.
    pub suspect: bool,
    /// Mark share of all found regions together at least this.
    pub min_mark_share: Option<f64>,
    /// Lift at least this.
    pub min_lift: Option<f64>,
    /// Painting the regions out dropped the target's score by at least this.
    pub min_drop: Option<f32>,
    /// Painting the regions out changed the top class.
    pub flipped: bool,
}

impl Limits {
    /// The limits as the user gave them, or "suspect" when none was given.
    pub fn or_suspect(self) -> Limits {
        if self == Limits::default() { Limits { suspect: true, ..self } } else { self }
    }

    /// Whether `row` passes every limit, and if so a short text saying which were checked.
    pub fn passes(&self, row: &Row) -> Option<String> {
        let mut why = vec![];
        if self.suspect {
            if !row.suspect {
                return None;
            }
            why.push("suspect".to_string());
        }
        if let Some(m) = self.min_mark_share {
            let v = row.mark_share.filter(|&s| s >= m)?;
            why.push(format!("mark share {v:.3}"));
        }
        if let Some(m) = self.min_lift {
            let v = row.lift.filter(|&s| s >= m)?;
            why.push(format!("lift {v:.2}"));
        }
        if let Some(m) = self.min_drop {
            let v = row.removal_drop.filter(|&s| s >= m)?;
            why.push(format!("drop {v:.3}"));
        }
        if self.flipped {
            if row.flipped() != Some(true) {
                return None;
            }
            why.push("flipped".to_string());
        }
        Some(format!("sweep: {}", why.join(", ")))
    }
}

/// What a sweep's `partial.json` says that this source needs.
#[derive(Deserialize)]
struct Partial {
    settings: String,
    images_root: PathBuf,
}

/// A sweep's output folder: its rows above [`Limits`], and on each picked image the regions the
/// sweep's own finders found (found again with the sweep's finder settings, on the image opened
/// with the sweep's frame and window; the sweep keeps only their labels, and the labels found
/// again are checked against them).
pub struct SweepSource {
    dir: PathBuf,
    limits: Limits,
    finder: FinderSettings,
    open: OpenOptions,
    /// Image (same-file key) → its row.
    rows: BTreeMap<PathBuf, Row>,
    content_hash: String,
}

impl SweepSource {
    pub fn open(dir: &Path, limits: Limits) -> Result<SweepSource> {
        let pp = dir.join("partial.json");
        let text = std::fs::read_to_string(&pp)
            .with_context(|| format!("{} holds no partial.json: give the output folder of a finished `spurion sweep` (or of sweep-merge)", dir.display()))?;
        let partial: Partial = serde_json::from_str(&text).with_context(|| format!("{} is damaged: run the sweep again", pp.display()))?;
        let settings: Value = serde_json::from_str(&partial.settings).with_context(|| format!("the settings in {} are damaged", pp.display()))?;
        let finder: FinderSettings = serde_json::from_value(settings.get("finder").cloned().unwrap_or(Value::Null))
            .with_context(|| format!("{} names no finder settings this spurion reads: run the sweep again with this version", pp.display()))?;
        let frame = settings.get("frame").and_then(Value::as_u64).unwrap_or(0) as usize;
        let window = serde_json::from_value(settings.get("window").cloned().unwrap_or(Value::Null))
            .with_context(|| format!("{} names a window this spurion does not read: run the sweep again with this version", pp.display()))?;
        let open = OpenOptions { frame, window };
        let jp = dir.join("sweep.jsonl");
        let rows_text = std::fs::read_to_string(&jp).with_context(|| format!("cannot read {}: is the sweep finished?", jp.display()))?;
        let mut rows = BTreeMap::new();
        for (i, l) in rows_text.lines().enumerate().filter(|(_, l)| !l.trim().is_empty()) {
            let row: Row = serde_json::from_str(l).with_context(|| format!("line {} of {} is not a sweep row", i + 1, jp.display()))?;
            let path = row.path.split('/').fold(partial.images_root.clone(), |p, part| p.join(part));
            rows.insert(same_file_key(&path), row);
        }
        let content_hash = sha256_hex(format!("{}\n{rows_text}", partial.settings).as_bytes());
        Ok(SweepSource { dir: dir.to_path_buf(), limits: limits.or_suspect(), finder, open, rows, content_hash })
    }

    fn row(&self, item: &Item) -> Option<&Row> {
        self.rows.get(&same_file_key(&item.path))
    }

    /// How many of the sweep's rows pass the limits.
    pub fn picked_count(&self) -> usize {
        self.rows.values().filter(|r| self.limits.passes(r).is_some()).count()
    }
}

impl Source for SweepSource {
    fn name(&self) -> &'static str {
        "sweep"
    }

    fn settings(&self) -> Value {
        json!({ "sweep": same_file_key(&self.dir), "sweep_sha256": self.content_hash, "limits": self.limits, "finder": self.finder })
    }

    fn picks(&self, item: &Item) -> Option<String> {
        self.limits.passes(self.row(item)?)
    }

    fn regions(&self, item: &Item, _picture: &Picture) -> Result<Vec<Region>> {
        // Opened again as the sweep opened it (its frame and window may differ from the job's).
        let regions = found(&Picture::open_with(&item.path, &self.open)?, &self.finder);
        if let Some(row) = self.row(item) {
            let recorded: Vec<&str> = row.region_labels.split("; ").filter(|s| !s.is_empty()).collect();
            if let Some(r) = regions.iter().find(|r| !recorded.contains(&r.label().as_str())) {
                bail!(
                    "{}: the finders now find \"{}\", which the sweep in {} did not record (it found: {}). The image or spurion \
                     changed since the sweep: run the sweep again",
                    item.rel,
                    r.label(),
                    self.dir.display(),
                    if recorded.is_empty() { "none".to_string() } else { recorded.join("; ") }
                );
            }
        }
        Ok(regions)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn limits_pick_rows_that_pass_every_one_and_suspect_by_default() {
        let mut row = crate::sweep::row::tests::blank();
        row.mark_share = Some(0.4);
        row.lift = Some(3.0);
        row.removal_drop = Some(1.5);
        row.top = 1;
        row.top_after_removal = Some(0);
        assert_eq!(Limits::default().or_suspect().passes(&row), None, "not suspect");
        row.suspect = true;
        assert!(Limits::default().or_suspect().passes(&row).is_some());
        let l = Limits { min_mark_share: Some(0.3), min_drop: Some(1.0), flipped: true, ..Limits::default() };
        assert_eq!(l.passes(&row).unwrap(), "sweep: mark share 0.400, drop 1.500, flipped");
        assert!(Limits { min_mark_share: Some(0.5), ..Limits::default() }.passes(&row).is_none());
        assert!(Limits { min_lift: Some(3.5), ..Limits::default() }.passes(&row).is_none());
        row.mark_share = None;
        assert!(l.passes(&row).is_none(), "a missing figure fails its limit");
        row.mark_share = Some(0.4);
        row.top_after_removal = Some(1);
        assert!(l.passes(&row).is_none(), "no flip");
    }
}
