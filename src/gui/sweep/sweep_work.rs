//! The sweep's worker jobs: a sweep run as `spurion sweep` runs it (the same plan, ledger,
//! cache, shard run and files, with the reading form's request), an earlier sweep's files read
//! back, and the table's thumbnails looked up in the sweep's cache.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Instant;

use anyhow::{Context, Result, bail};
use ndarray::Array2;

use crate::control::Control;
use crate::feed::{FeedCard, OpenOptions};
use crate::ledger::Ledger;
use crate::methods::Request;
use crate::regions::DrawnFile;
use crate::report::sweep::{self as files, ThumbSource, pictures};
use crate::sweep::{self, Cache, Exclude, Groups, Setup, Shard, ShardResult, SweepLedger};

use crate::gui::state::Session;
use crate::gui::sweep::SweepDone;

/// What the table's thumbnails need to find an image's map in the sweep's cache.
pub struct ThumbLookup {
    pub card: Arc<FeedCard>,
    pub open: OpenOptions,
    pub cache_dir: PathBuf,
    pub model_sha256: String,
    /// The sweep's settings text (part of every cache key).
    pub settings: String,
    /// The regions drawn on each image when the sweep ran (part of its cache key).
    pub drawn: BTreeMap<String, DrawnFile>,
    pub images_root: PathBuf,
}

/// Everything a sweep started from the inspector is run with.
pub struct SweepPlan {
    pub session: Arc<Session>,
    pub request: Request,
    pub images: PathBuf,
    pub out: PathBuf,
    pub groups: Groups,
    pub exclude: Exclude,
    /// The ledger as it stood when the sweep started.
    pub ledger: Option<Ledger>,
    pub leave_out_excluded: bool,
    pub id: u64,
}

/// The exclude patterns of the view's field: separated by commas.
pub fn exclude_of(field: &str) -> Result<Exclude> {
    let patterns: Vec<String> = field.split(',').map(str::trim).filter(|p| !p.is_empty()).map(str::to_string).collect();
    Exclude::new(&patterns)
}

/// The groups of the view's field: the first-level sub-folders when empty.
pub fn groups_of(field: &str) -> Result<Groups> {
    if field.trim().is_empty() { Ok(Groups::Folders) } else { Groups::parse(field.trim()) }
}

fn open_options(card: &FeedCard) -> OpenOptions {
    OpenOptions { frame: 0, window: card.input.window.clone() }
}

/// Runs a whole sweep (as `spurion sweep` does with the same folders and request), writes its
/// files into `plan.out`, and returns what the view shows. A cancel keeps what was read in the
/// cache; the error then is the engine's cancel.
pub fn run(plan: SweepPlan, ctl: &Control) -> Result<SweepDone> {
    let started = Instant::now();
    let s = &plan.session;
    if !plan.images.is_dir() {
        bail!("the sweep's folder {} is not a folder; type or pick the folder of images to sweep", plan.images.display());
    }
    let mut items = sweep::plan(&plan.images, &plan.groups, &plan.exclude, Shard::ALL)?;
    let in_ledger = plan.ledger.as_ref().map(|l| SweepLedger::new(l, &items));
    let left_out = match &in_ledger {
        Some(l) if plan.leave_out_excluded => l.leave_out_excluded(&mut items),
        _ => 0,
    };
    let drawn = in_ledger.as_ref().map(SweepLedger::drawn).unwrap_or_default();
    let cache_dir = plan.out.join("cache");
    let cache = Cache::open(&cache_dir)?;
    let open = open_options(&s.card);
    let setup = Setup {
        model: &s.model,
        card: &s.card,
        request: &plan.request,
        open: open.clone(),
        finder: Default::default(),
        flag: Default::default(),
        drawn: drawn.clone(),
    };
    let root = std::path::absolute(&plan.images).unwrap_or_else(|_| plan.images.clone());
    let mut result = sweep::run_shard(&setup, &items, &cache, Shard::ALL, root.clone(), ctl)?;
    if let Some(l) = &in_ledger {
        l.set_verdicts(&mut result.rows);
    }
    let seconds = started.elapsed().as_secs_f64();
    let groups = files::write(&result, &plan.out, seconds, Some(&ThumbSource { card: &s.card, open: &open }))?;
    let lookup = ThumbLookup {
        card: s.card.clone(),
        open,
        cache_dir,
        model_sha256: s.model.sha256().to_string(),
        settings: result.settings.clone(),
        drawn,
        images_root: root,
    };
    Ok(done(plan.id, plan.out, result, groups, left_out, seconds, false, lookup))
}

/// Reads back the files an earlier sweep (from here or `spurion sweep`) wrote into `out`.
pub fn load(session: &Session, out: &Path, ledger: Option<&Ledger>, id: u64) -> Result<SweepDone> {
    let result = files::read(out).with_context(|| format!("{} holds no sweep's files to show", out.display()))?;
    let groups = sweep::summarise(&result.rows, &result.atlas, &result.images_root)?;
    let items: Vec<sweep::Item> = result
        .rows
        .iter()
        .map(|r| sweep::Item { rel: r.path.clone(), path: result.images_root.join(&r.path), group: r.group.clone() })
        .collect();
    let drawn = ledger.map(|l| SweepLedger::new(l, &items).drawn()).unwrap_or_default();
    let lookup = ThumbLookup {
        card: session.card.clone(),
        open: open_options(&session.card),
        cache_dir: out.join("cache"),
        model_sha256: session.model.sha256().to_string(),
        settings: result.settings.clone(),
        drawn,
        images_root: result.images_root.clone(),
    };
    Ok(done(id, out.to_path_buf(), result, groups, 0, 0.0, true, lookup))
}

#[allow(clippy::too_many_arguments)]
fn done(
    id: u64,
    out: PathBuf,
    result: ShardResult,
    groups: Vec<sweep::GroupSummary>,
    left_out: usize,
    seconds: f64,
    from_files: bool,
    lookup: ThumbLookup,
) -> SweepDone {
    let atlas = result
        .atlas
        .iter()
        .map(|(g, a)| {
            let (h, w) = a.sum.dim();
            (g.clone(), colour_image(&pictures::atlas_picture(&a.mean())), [w, h])
        })
        .collect();
    // The recurring hotspots and their exemplars, drawn here on the worker, not in the frame.
    let recurring = sweep::find_recurring(&result.rows, &sweep::RecurringSettings::default())
        .into_iter()
        .map(|c| {
            let pics = c.exemplars.iter().filter_map(|m| files::recurring::exemplar_picture(&result.images_root, m)).map(|p| colour_image(&p)).collect();
            (c, pics)
        })
        .collect();
    SweepDone {
        id,
        out,
        recurring,
        images_root: result.images_root,
        rows: result.rows,
        skipped: result.skipped,
        groups,
        atlas,
        computed: result.computed,
        cached: result.cached,
        left_out,
        seconds,
        from_files,
        lookup: Arc::new(lookup),
    }
}

fn colour_image(img: &image::RgbImage) -> egui::ColorImage {
    egui::ColorImage::from_rgb([img.width() as usize, img.height() as usize], img.as_raw())
}

/// One row's thumbnail: the image on the model's grid with the supporting part of its map
/// tinted over it, as the sweep's report draws it; the picture alone when the cache holds no
/// map for it (a sweep made with another model or settings).
pub fn thumbnail(l: &ThumbLookup, rel: &str) -> Result<egui::ColorImage> {
    let path = l.images_root.join(rel);
    let key = sweep::cache::key(&l.model_sha256, &sweep::cache::content_sha256(&path)?, &l.settings, &sweep::read::drawn_extra(l.drawn.get(rel)));
    let grid = Cache::open(&l.cache_dir)?.get(&key).map(|e| e.grid).unwrap_or_else(|| Array2::zeros((0, 0)));
    let (_, tint) = pictures::thumbnails(&ThumbSource { card: &l.card, open: &l.open }, &path, &grid)?;
    let img = image::load_from_memory(&tint).context("decoding a thumbnail")?.to_rgb8();
    Ok(colour_image(&img))
}
