//! `spurion sweep`: one reading per image over a whole folder (or one shard of it), resumable,
//! written as tables, atlas pictures and a self-contained report; `spurion sweep-merge` joins
//! the shards of a sweep run on a cluster.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::time::Instant;

use anyhow::{Context, Result, bail};
use clap::Args;
use indicatif::{ProgressBar, ProgressStyle};

use super::ModelArgs;
use super::reading_args::ReadingArgs;
use crate::feed::OpenOptions;
use crate::ledger::Ledger;
use crate::regions::DrawnFile;
use crate::report::sweep::{self as files, ThumbSource};
use crate::sweep::{self, Cache, Exclude, GroupSummary, Groups, Setup, Shard, ShardResult, SweepLedger};

#[derive(Args, Debug)]
pub struct SweepArgs {
    #[command(flatten)]
    pub model: ModelArgs,
    /// The folder of images, searched recursively (PNG, JPEG, TIFF, BMP, DICOM).
    #[arg(long)]
    pub images: PathBuf,
    /// Folder for sweep.csv, sweep.jsonl, groups.json, skipped.csv, atlas/, report.html (a
    /// shard writes into OUT/shard-K-of-N/).
    #[arg(long)]
    pub out: PathBuf,
    #[command(flatten)]
    pub reading: ReadingArgs,
    /// The frame of multi-frame DICOM files, from 0.
    #[arg(long, default_value_t = 0)]
    pub frame: usize,
    /// Groups: the first-level sub-folders (default), or FILE:COLUMN, a column of a CSV
    /// manifest whose `file` or `path` column names each image.
    #[arg(long, value_name = "FILE:COLUMN")]
    pub groups: Option<String>,
    /// Leave out paths: a name anywhere (masks, *.seg.png) or a path from the images folder
    /// (site/old/**). May be given more than once.
    #[arg(long, value_name = "PATTERN")]
    pub exclude: Vec<String>,
    /// Run one slice of the sweep: K/N (1 ≤ K ≤ N), or auto to take it from a Slurm array task
    /// or a Kubernetes Indexed Job. Merge the slices with `spurion sweep-merge`.
    #[arg(long, value_name = "K/N|auto")]
    pub shard: Option<String>,
    /// The number of slices, for --shard auto where the scheduler does not say it (a
    /// Kubernetes Indexed Job's completions).
    #[arg(long, value_name = "N")]
    pub shard_count: Option<usize>,
    /// Where each image's result is kept, so a stopped sweep goes on and a repeated one costs
    /// nothing (default OUT/cache, shared by the shards).
    #[arg(long)]
    pub cache: Option<PathBuf>,
    /// A curator's ledger: its verdicts go into the table and the report, and the regions drawn
    /// on an image join the found ones (figures, removal, the flag).
    #[arg(long)]
    pub ledger: Option<PathBuf>,
    /// Leave out the images the ledger marks exclude.
    #[arg(long, requires = "ledger")]
    pub leave_out_excluded: bool,
    /// Worker threads (default: every core).
    #[arg(long)]
    pub threads: Option<usize>,
    /// No progress bar.
    #[arg(long, short = 'q')]
    pub quiet: bool,
}

#[derive(Args, Debug)]
pub struct MergeArgs {
    /// The shards' output folders (OUT/shard-K-of-N), or folders that hold them.
    #[arg(required = true)]
    pub dirs: Vec<PathBuf>,
    /// Folder for the merged files.
    #[arg(long)]
    pub out: PathBuf,
}

fn shard_of(a: &SweepArgs) -> Result<Shard> {
    match a.shard.as_deref() {
        None => {
            if a.shard_count.is_some() {
                bail!("--shard-count goes with --shard auto");
            }
            Ok(Shard::ALL)
        }
        Some("auto") => Shard::from_env(&|k| std::env::var(k).ok(), a.shard_count),
        Some(s) => Shard::parse(s),
    }
}

fn progress_bar(quiet: bool) -> ProgressBar {
    if quiet {
        return ProgressBar::hidden();
    }
    let bar = ProgressBar::new(1);
    bar.set_style(
        ProgressStyle::with_template("sweep [{bar:32}] {pos}/{len} images, {per_sec}, {elapsed} (time left {eta})")
            .unwrap()
            .progress_chars("=> "),
    );
    bar
}

pub fn run(a: &SweepArgs) -> Result<()> {
    let bar = progress_bar(a.quiet);
    let ctl = super::explain::control_for(&bar);
    let (result, groups, out, seconds) = match run_with(a, &ctl) {
        Ok(r) => r,
        Err(e) if crate::model::is_cancelled(&e) => {
            bar.abandon();
            eprintln!(
                "spurion: the images read before the cancel are kept in the cache {}; run the same command again to go on",
                cache_dir(a).display()
            );
            return Err(e);
        }
        Err(e) => return Err(e),
    };
    bar.finish_and_clear();
    tell(&result, &groups, &out, seconds);
    Ok(())
}

fn cache_dir(a: &SweepArgs) -> PathBuf {
    a.cache.clone().unwrap_or_else(|| a.out.join("cache"))
}

/// `spurion sweep` without a terminal: the same work and files, progress and cancel through
/// `ctl` (the Python package runs it so). Returns the result, each group's figures, the folder
/// written and the seconds taken.
pub fn run_with(a: &SweepArgs, ctl: &crate::control::Control) -> Result<(ShardResult, Vec<GroupSummary>, PathBuf, f64)> {
    let request = a.reading.request()?;
    let shard = shard_of(a)?;
    let exclude = Exclude::new(&a.exclude)?;
    let groups = match &a.groups {
        Some(g) => Groups::parse(g)?,
        None => Groups::Folders,
    };
    if let Some(n) = a.threads {
        if n == 0 {
            bail!("--threads must be 1 or more");
        }
        rayon::ThreadPoolBuilder::new().num_threads(n).build_global().context("cannot set up the worker threads")?;
    }
    let model = a.model.load()?;
    let card = a.model.card(&model)?;
    super::warn_guessed_feed(&card, &model);
    let mut items = sweep::plan(&a.images, &groups, &exclude, shard)?;
    let ledger = a.ledger.as_deref().map(|l| Ledger::open(&Ledger::file_for(l))).transpose()?;
    // Each image's key in the ledger (an image outside the ledger's root has none).
    let in_ledger = ledger.as_ref().map(|l| SweepLedger::new(l, &items));
    if let Some(l) = &in_ledger
        && a.leave_out_excluded
    {
        eprintln!("leaving out {} images the ledger marks exclude", l.leave_out_excluded(&mut items));
    }
    let drawn: BTreeMap<String, DrawnFile> = in_ledger.as_ref().map(SweepLedger::drawn).unwrap_or_default();
    let out = if shard.count > 1 { a.out.join(shard.folder_name()) } else { a.out.clone() };
    let cache = Cache::open(&cache_dir(a))?;
    let open = OpenOptions { frame: a.frame, window: card.input.window.clone() };
    let setup = Setup {
        model: &model,
        card: &card,
        request: &request,
        open: open.clone(),
        finder: Default::default(),
        flag: Default::default(),
        drawn,
    };
    let started = Instant::now();
    let root = std::path::absolute(&a.images).unwrap_or_else(|_| a.images.clone());
    let mut result = sweep::run_shard(&setup, &items, &cache, shard, root, ctl)?;
    if let Some(l) = &in_ledger {
        l.set_verdicts(&mut result.rows);
    }
    let seconds = started.elapsed().as_secs_f64();
    let groups = files::write(&result, &out, seconds, Some(&ThumbSource { card: &card, open: &open }))?;
    Ok((result, groups, out, seconds))
}

/// The folders a merge reads: each given folder that is a shard's, or the shard folders inside it.
fn shard_dirs(dirs: &[PathBuf]) -> Result<Vec<PathBuf>> {
    let mut found = vec![];
    for d in dirs {
        if d.join("partial.json").is_file() {
            found.push(d.clone());
            continue;
        }
        let rd = std::fs::read_dir(d).with_context(|| format!("cannot read folder {}", d.display()))?;
        let mut inner: Vec<PathBuf> =
            rd.filter_map(|e| e.ok().map(|e| e.path())).filter(|p| p.join("partial.json").is_file() && is_shard_folder(p)).collect();
        if inner.is_empty() {
            bail!("{} is neither a sweep shard's output folder nor holds any (shard-K-of-N with a partial.json)", d.display());
        }
        inner.sort();
        found.extend(inner);
    }
    Ok(found)
}

fn is_shard_folder(p: &Path) -> bool {
    p.file_name().is_some_and(|n| n.to_string_lossy().starts_with("shard-"))
}

pub fn merge(a: &MergeArgs) -> Result<()> {
    let started = Instant::now();
    let dirs = shard_dirs(&a.dirs)?;
    let parts = dirs.iter().map(|d| files::read(d)).collect::<Result<Vec<_>>>()?;
    let merged = sweep::merge(parts, &dirs)?;
    let seconds = started.elapsed().as_secs_f64();
    let groups = files::write(&merged, &a.out, seconds, None)?;
    eprintln!("merged {} shards", dirs.len());
    tell(&merged, &groups, &a.out, seconds);
    Ok(())
}

/// What a finished sweep says on the terminal: the counts, the groups, where the files are.
fn tell(result: &ShardResult, groups: &[GroupSummary], out: &Path, seconds: f64) {
    let suspect = result.rows.iter().filter(|r| r.suspect).count();
    println!(
        "{} images read ({} computed, {} from the cache), {} could not be read; {} suspect; {:.1} s",
        result.rows.len(),
        result.computed,
        result.cached,
        result.skipped.len(),
        suspect,
        seconds
    );
    let wide = groups.iter().map(|g| g.group.len()).max().unwrap_or(5).max(5);
    println!("{:<wide$}  {:>6}  {:>7}  {:>15}  {:>11}", "group", "images", "suspect", "mean mark share", "flip rate");
    for g in groups {
        println!(
            "{:<wide$}  {:>6}  {:>7}  {:>15}  {:>11}",
            g.group,
            g.images,
            g.suspect,
            g.mean_mark_share.map_or("—".into(), |i| format!("{:.3}", i.estimate)),
            g.flip_rate.map_or("—".into(), |i| format!("{:.0} %", 100.0 * i.estimate)),
        );
    }
    let wide_gap = result.rows.iter().filter(|r| r.completeness_gap.is_some_and(|g| g > 0.05)).count();
    if wide_gap > 0 {
        // The IG paper's advice is a gap within 5% (Sundararajan et al. 2017, section 3).
        println!("note: {wide_gap} readings have a completeness gap over 5% (see the completeness_gap column)");
    }
    let missed: Vec<&str> = result.rows.iter().filter(|r| r.completeness_reached == Some(false)).map(|r| r.path.as_str()).collect();
    if let Some(first) = missed.first() {
        println!(
            "WARNING: {} reading{} did not reach the target completeness gap (the refinement stopped at its cap; e.g. {first}); \
             see the completeness_reached column",
            missed.len(),
            if missed.len() == 1 { "" } else { "s" }
        );
    }
    if let Some(s) = result.skipped.first() {
        println!("could not read {} images, e.g. {}: {} (all in skipped.csv)", result.skipped.len(), s.path, s.reason);
    }
    println!("wrote {} (sweep.csv, sweep.jsonl, groups.json, skipped.csv, atlas/, report.html)", out.display());
}
