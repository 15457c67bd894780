//! A sweep's files: written for one shard (or a whole sweep, which is shard 1 of 1) and read
//! back to merge shards. Every run writes the same set, so merged shards give the files an
//! unsharded run gives (the seconds of each row aside).
//!
//! - `sweep.csv`, `sweep.jsonl`: one row per image ([`Row`]).
//! - `skipped.csv`: the images that could not be read, and why.
//! - `groups.json`: each group's figures ([`GroupSummary`]) and the recurring hotspots
//!   ([`crate::sweep::RecurringHotspot`]), as a [`GroupsFile`].
//! - `atlas/NAME.png`: each group's atlas as a picture; `atlas/NAME.sum.npy` its exact sum.
//! - `partial.json`: what merging needs (settings, images folder, shard, atlas counts).
//! - `report.html`: the self-contained report.
//! - `run.json`: this run's own facts (how many images it computed and took from the cache,
//!   seconds) and the feed the images were given (`feed`, each value with its origin); the one
//!   file that differs between runs.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use anyhow::{Context, Result};
use ndarray::{Array2, ArrayD};
use serde::{Deserialize, Serialize};

use super::pictures::{ThumbSource, atlas_picture, thumbnails};
use crate::sweep::{AtlasSum, GroupSummary, GroupsFile, RecurringSettings, Row, Shard, ShardResult, Skipped, find_recurring, summarise};

#[derive(Serialize, Deserialize)]
struct Partial {
    settings: String,
    images_root: PathBuf,
    shard: Shard,
    /// Group → (atlas file stem, images summed).
    atlas: BTreeMap<String, (String, usize)>,
    /// Image path → thumbnail file stem (in `thumbs/`).
    thumbs: BTreeMap<String, String>,
}

/// This run's own facts.
#[derive(Clone, Debug, Serialize, Deserialize)]
pub struct RunFacts {
    pub version: String,
    pub shard: Shard,
    pub images: usize,
    pub skipped: usize,
    pub computed: usize,
    pub cached: usize,
    pub seconds: f64,
    /// How the images were fed, each value with its origin (card, graph or default).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub feed: Option<crate::feed::FeedSummary>,
}

/// A group name as a file stem: letters, digits, `-` and `_` kept, anything else `_`, and a
/// short hash of the name so that two names never share a stem.
pub fn stem(group: &str) -> String {
    use sha2::{Digest, Sha256};
    let clean: String = group.chars().map(|c| if c.is_ascii_alphanumeric() || c == '-' || c == '_' { c } else { '_' }).collect();
    let h = Sha256::digest(group.as_bytes());
    format!("{}-{:02x}{:02x}", clean.trim_matches('_'), h[0], h[1])
}

fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    use std::io::Write;
    let dir = path.parent().unwrap_or(Path::new("."));
    let mut tmp = crate::sweep::cache::temp_file_in(dir).with_context(|| format!("cannot write in {}", dir.display()))?;
    tmp.write_all(bytes).with_context(|| format!("cannot write {}", path.display()))?;
    tmp.persist(path).with_context(|| format!("cannot write {}", path.display()))?;
    Ok(())
}

/// Writes every file of a finished shard (or whole sweep) into `out`, and returns the groups'
/// figures. Thumbnails the result does not hold yet are drawn from its ranked maps, opening the
/// images again through `thumbs` (an image that no longer opens gets none, not an error).
pub fn write(result: &ShardResult, out: &Path, seconds: f64, thumbs: Option<&ThumbSource<'_>>) -> Result<Vec<GroupSummary>> {
    std::fs::create_dir_all(out.join("atlas")).with_context(|| format!("cannot create the output folder {} (check permissions or choose another --out)", out.display()))?;
    let groups = summarise(&result.rows, &result.atlas, &result.images_root)?;
    let recurring = find_recurring(&result.rows, &RecurringSettings::default());
    let mut csv = csv::Writer::from_writer(vec![]);
    for r in &result.rows {
        csv.serialize(r.for_csv())?;
    }
    write_atomic(&out.join("sweep.csv"), &csv.into_inner()?)?;
    let mut jsonl = String::new();
    for r in &result.rows {
        jsonl.push_str(&serde_json::to_string(r)?);
        jsonl.push('\n');
    }
    write_atomic(&out.join("sweep.jsonl"), jsonl.as_bytes())?;
    let mut sk = csv::Writer::from_writer(vec![]);
    sk.write_record(["path", "reason"])?;
    for s in &result.skipped {
        sk.write_record([&s.path, &s.reason])?;
    }
    write_atomic(&out.join("skipped.csv"), &sk.into_inner()?)?;
    let file = GroupsFile { groups, recurring_hotspots: recurring };
    write_atomic(&out.join("groups.json"), (serde_json::to_string_pretty(&file)? + "\n").as_bytes())?;
    let GroupsFile { groups, recurring_hotspots: recurring } = file;
    let mut atlas_files = BTreeMap::new();
    for (g, a) in &result.atlas {
        let st = stem(g);
        crate::render::save(&out.join("atlas").join(format!("{st}.png")), &atlas_picture(&a.mean()))?;
        write_i64(&out.join("atlas").join(format!("{st}.sum.npy")), &a.sum)?;
        atlas_files.insert(g.clone(), (st, a.count));
    }
    std::fs::create_dir_all(out.join("thumbs")).with_context(|| format!("cannot create {}", out.join("thumbs").display()))?;
    let mut drawn = result.thumbs.clone();
    if let Some(src) = thumbs {
        for (path, grid) in &result.ranked_maps {
            if !drawn.contains_key(path)
                && let Ok(t) = thumbnails(src, &result.images_root.join(path), grid)
            {
                drawn.insert(path.clone(), t);
            }
        }
    }
    let mut thumb_files = BTreeMap::new();
    for (path, (plain, tint)) in &drawn {
        let st = stem(path);
        write_atomic(&out.join("thumbs").join(format!("{st}.png")), plain)?;
        write_atomic(&out.join("thumbs").join(format!("{st}.tint.png")), tint)?;
        thumb_files.insert(path.clone(), st);
    }
    let partial = Partial {
        settings: result.settings.clone(),
        images_root: result.images_root.clone(),
        shard: result.shard,
        atlas: atlas_files,
        thumbs: thumb_files,
    };
    write_atomic(&out.join("partial.json"), (serde_json::to_string_pretty(&partial)? + "\n").as_bytes())?;
    let html = super::html::sweep_html(result, &groups, &recurring, &drawn)?;
    write_atomic(&out.join("report.html"), html.as_bytes())?;
    let facts = RunFacts {
        version: env!("CARGO_PKG_VERSION").into(),
        shard: result.shard,
        images: result.rows.len(),
        skipped: result.skipped.len(),
        computed: result.computed,
        cached: result.cached,
        seconds,
        feed: result.feed.clone(),
    };
    write_atomic(&out.join("run.json"), (serde_json::to_string_pretty(&facts)? + "\n").as_bytes())?;
    Ok(groups)
}

fn write_i64(path: &Path, a: &Array2<i64>) -> Result<()> {
    use ndarray_npy::WriteNpyExt;
    let mut bytes = vec![];
    a.as_standard_layout().write_npy(&mut bytes).with_context(|| format!("cannot encode {}", path.display()))?;
    write_atomic(path, &bytes)
}

fn read_i64(path: &Path) -> Result<Array2<i64>> {
    use ndarray_npy::ReadNpyExt;
    let f = std::fs::File::open(path).with_context(|| format!("cannot read {}", path.display()))?;
    let a = ArrayD::<i64>::read_npy(f).with_context(|| format!("{} is not an atlas sum", path.display()))?;
    Ok(a.into_dimensionality()?)
}

/// Reads back what a shard wrote into `dir`.
pub fn read(dir: &Path) -> Result<ShardResult> {
    let partial: Partial = serde_json::from_str(
        &std::fs::read_to_string(dir.join("partial.json")).with_context(|| format!("{} holds no partial.json: is it the output folder of a sweep?", dir.display()))?,
    )
    .with_context(|| format!("{} is damaged", dir.join("partial.json").display()))?;
    let text = std::fs::read_to_string(dir.join("sweep.jsonl")).with_context(|| format!("cannot read {}", dir.join("sweep.jsonl").display()))?;
    let rows = text
        .lines()
        .enumerate()
        .map(|(i, l)| serde_json::from_str(l).with_context(|| format!("line {} of {} is not a row", i + 1, dir.join("sweep.jsonl").display())))
        .collect::<Result<Vec<Row>>>()?;
    let mut skipped = vec![];
    let mut r = csv::Reader::from_path(dir.join("skipped.csv")).with_context(|| format!("cannot read {}", dir.join("skipped.csv").display()))?;
    for rec in r.deserialize() {
        let s: Skipped = rec.with_context(|| format!("{} is damaged", dir.join("skipped.csv").display()))?;
        skipped.push(s);
    }
    let mut atlas = BTreeMap::new();
    for (g, (st, count)) in &partial.atlas {
        atlas.insert(g.clone(), AtlasSum { sum: read_i64(&dir.join("atlas").join(format!("{st}.sum.npy")))?, count: *count });
    }
    let mut thumbs = BTreeMap::new();
    for (path, st) in &partial.thumbs {
        let read = |name: String| std::fs::read(dir.join("thumbs").join(&name)).with_context(|| format!("cannot read thumbs/{name} in {}", dir.display()));
        thumbs.insert(path.clone(), (read(format!("{st}.png"))?, read(format!("{st}.tint.png"))?));
    }
    let run: Option<RunFacts> = std::fs::read_to_string(dir.join("run.json")).ok().and_then(|t| serde_json::from_str(&t).ok());
    Ok(ShardResult {
        settings: partial.settings,
        images_root: partial.images_root,
        shard: partial.shard,
        rows,
        skipped,
        atlas,
        computed: run.as_ref().map_or(0, |r| r.computed),
        cached: run.as_ref().map_or(0, |r| r.cached),
        ranked_maps: BTreeMap::new(),
        thumbs,
        feed: run.and_then(|r| r.feed),
    })
}
