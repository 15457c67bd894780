//! Running one shard of a sweep: every image of the slice read (or taken from the cache), in
//! parallel, with progress and cancel; unreadable images listed with their reason.

use std::collections::BTreeMap;
use std::path::PathBuf;
use std::sync::atomic::{AtomicUsize, Ordering};

use anyhow::Result;
use ndarray::Array2;
use rayon::prelude::*;
use serde::{Deserialize, Serialize};

use super::cache::{Cache, Entry, content_sha256, key};
use super::plan::{Item, Shard};
use super::read::Setup;
use super::row::Row;
use super::summary::AtlasSum;
use crate::control::{Cancelled, Control};

/// An image the sweep could not read, and why.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Skipped {
    pub path: String,
    pub reason: String,
}

/// What one shard found (or, merged, a whole sweep).
pub struct ShardResult {
    /// The settings every shard of one sweep must share.
    pub settings: String,
    pub images_root: PathBuf,
    pub shard: Shard,
    /// Sorted by path.
    pub rows: Vec<Row>,
    pub skipped: Vec<Skipped>,
    pub atlas: BTreeMap<String, AtlasSum>,
    /// Images read in this run, and taken from the cache.
    pub computed: usize,
    pub cached: usize,
    /// The maps on the model grid of the [`RANKED`] images with the largest mark share, for the
    /// report's thumbnails.
    pub ranked_maps: BTreeMap<String, Array2<f32>>,
    /// Thumbnails already drawn (the picture and its tinted map, PNG bytes), by image path:
    /// those of shards read back from their folders for merging.
    pub thumbs: BTreeMap<String, (Vec<u8>, Vec<u8>)>,
    /// How the images were fed, each value with its origin (`run.json`'s `feed`); `None` for a
    /// shard written before it was recorded.
    pub feed: Option<crate::feed::FeedSummary>,
}

/// How many images the report ranks with thumbnails.
pub const RANKED: usize = 60;

/// The order of the report's ranking: mark share, largest first, then path.
pub fn ranking(a: &Row, b: &Row) -> std::cmp::Ordering {
    b.mark_share.unwrap_or(-1.0).total_cmp(&a.mark_share.unwrap_or(-1.0)).then_with(|| a.path.cmp(&b.path))
}

/// Reads every item (in parallel; each reading under a control linked to `ctl`, so a cancel
/// stops them all). `ctl` advances by one per image. A cancel returns [`Cancelled`] once the
/// images already started have finished; everything read so far is in the cache.
pub fn run_shard(setup: &Setup<'_>, items: &[Item], cache: &Cache, shard: Shard, images_root: PathBuf, ctl: &Control) -> Result<ShardResult> {
    let settings = setup.settings_text();
    let model_sha = setup.model.sha256().to_string();
    let (computed, cached) = (AtomicUsize::new(0), AtomicUsize::new(0));
    ctl.begin(items.len() as u64);
    let results: Vec<std::result::Result<Entry, String>> = items
        .par_iter()
        .map(|item| -> Result<std::result::Result<Entry, String>> {
            ctl.check()?;
            let got = (|| -> Result<Entry> {
                let k = key(&model_sha, &content_sha256(&item.path)?, &settings, &setup.image_extra(item));
                if let Some(mut e) = cache.get(&k) {
                    cached.fetch_add(1, Ordering::Relaxed);
                    e.row.path = item.rel.clone();
                    e.row.group = item.group.clone();
                    return Ok(e);
                }
                let e = setup.read(item, &ctl.linked())?;
                cache.put(&k, &e)?;
                computed.fetch_add(1, Ordering::Relaxed);
                Ok(e)
            })();
            ctl.advance(1);
            match got {
                Ok(e) => Ok(Ok(e)),
                Err(e) if crate::model::is_cancelled(&e) => Err(e),
                // One paragraph: the chain of causes, as the command line prints errors.
                Err(e) => Ok(Err(e.chain().map(|c| c.to_string()).collect::<Vec<_>>().join(": "))),
            }
        })
        .collect::<Result<Vec<_>>>()?;
    if ctl.is_cancelled() {
        return Err(Cancelled.into());
    }
    let mut read = vec![];
    let mut skipped = vec![];
    let mut atlas: BTreeMap<String, AtlasSum> = BTreeMap::new();
    for (item, r) in items.iter().zip(results) {
        match r {
            Ok(e) => {
                let a = atlas.entry(item.group.clone()).or_insert_with(|| AtlasSum::new(e.grid.dim()));
                if a.sum.dim() == e.grid.dim() {
                    a.add(&e.grid);
                }
                read.push(e);
            }
            Err(reason) => skipped.push(Skipped { path: item.rel.clone(), reason }),
        }
    }
    read.sort_by(|a, b| ranking(&a.row, &b.row));
    let ranked_maps = read.iter().take(RANKED).map(|e| (e.row.path.clone(), e.grid.clone())).collect();
    let mut rows: Vec<Row> = read.into_iter().map(|e| e.row).collect();
    rows.sort_by(|a, b| a.path.cmp(&b.path));
    Ok(ShardResult {
        settings,
        images_root,
        shard,
        rows,
        skipped,
        atlas,
        computed: computed.into_inner(),
        cached: cached.into_inner(),
        ranked_maps,
        thumbs: BTreeMap::new(),
        feed: Some(setup.card.summary(setup.model.path())),
    })
}
