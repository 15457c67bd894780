//! `spurion clean`: a copy of a folder with the chosen marks painted out (from a ledger and/or
//! a sweep), resumable, with its manifest; `--check MODEL` then runs the model on the originals
//! and the cleaned copy and reports what changed.

use std::path::PathBuf;

use anyhow::{Context, Result, bail};
use clap::Args;
use indicatif::{ProgressBar, ProgressStyle};

use crate::clean::check::{CheckSetup, check};
use crate::clean::{self, Job, LedgerRegions, LedgerSource, Limits, Source, SweepSource};
use crate::feed::{FeedCard, OpenOptions};
use crate::ledger::Verdict;
use crate::regions::{FinderSettings, RegionKind};
use crate::sweep::Groups;

#[derive(Args, Debug)]
pub struct CleanArgs {
    /// The folder of images to clean (only read; searched recursively).
    #[arg(long)]
    pub images: PathBuf,
    /// The folder for the cleaned copy (created; a stopped run into it goes on).
    #[arg(long)]
    pub out: PathBuf,
    /// A curator's ledger (file or folder): the images with the verdicts of --verdict are cleaned.
    #[arg(long)]
    pub ledger: Option<PathBuf>,
    /// The verdicts that pick an image from the ledger (default marked). May be given more than once.
    #[arg(long, value_name = "VERDICT", requires = "ledger")]
    pub verdict: Vec<String>,
    /// Which regions of a ledger's images are painted out: drawn-else-found (the drawn regions,
    /// or the finders' where none was drawn), drawn, found or both.
    #[arg(long, default_value = "drawn-else-found", value_parser = clap::builder::PossibleValuesParser::new(LedgerRegions::NAMES), requires = "ledger")]
    pub ledger_regions: String,
    /// A sweep's output folder: its images that pass the limits below are cleaned of the
    /// regions the sweep found (with no limit given: the images it flagged suspect).
    #[arg(long)]
    pub sweep: Option<PathBuf>,
    /// Only images the sweep flagged suspect.
    #[arg(long, requires = "sweep")]
    pub suspect: bool,
    /// Only images whose mark share is at least this (0..1).
    #[arg(long, requires = "sweep", value_name = "SHARE")]
    pub min_mark_share: Option<f64>,
    /// Only images whose lift is at least this.
    #[arg(long, requires = "sweep")]
    pub min_lift: Option<f64>,
    /// Only images where painting the regions out dropped the target's score by at least this.
    #[arg(long, requires = "sweep")]
    pub min_drop: Option<f32>,
    /// Only images whose top class changed when the regions were painted out.
    #[arg(long, requires = "sweep")]
    pub flipped: bool,
    /// The kinds of region painted out.
    #[arg(long, value_delimiter = ',', default_value = "border-band,burned-in-mark,drawn-region")]
    pub kinds: Vec<String>,
    /// Leave found regions the finders are less sure of than this (0..1).
    #[arg(long, default_value_t = 0.0)]
    pub min_confidence: f32,
    /// Never paint these paths (they are copied as they are), as `spurion sweep --exclude`.
    #[arg(long, value_name = "PATTERN")]
    pub exclude: Vec<String>,
    /// The frame of multi-frame DICOM files the regions are found on (all frames are painted).
    #[arg(long, default_value_t = 0)]
    pub frame: usize,
    /// Then run this model on the originals and the cleaned copy: per group, the share of
    /// predictions that change, and accuracy before and after where --labels gives labels.
    #[arg(long, value_name = "MODEL")]
    pub check: Option<PathBuf>,
    /// Feed card of the --check model (default: its sidecar).
    #[arg(long, requires = "check")]
    pub feed: Option<PathBuf>,
    /// Labels for --check: FILE:COLUMN of a CSV whose `file` or `path` column names each image
    /// (e.g. a demo's manifest.csv:label).
    #[arg(long, value_name = "FILE:COLUMN", requires = "check")]
    pub labels: Option<String>,
    /// Groups for --check: the first-level sub-folders (default), or FILE:COLUMN of a CSV.
    #[arg(long, value_name = "FILE:COLUMN", requires = "check")]
    pub groups: Option<String>,
    /// Worker threads (default: every core).
    #[arg(long)]
    pub threads: Option<usize>,
    /// No progress bar.
    #[arg(long, short = 'q')]
    pub quiet: bool,
}

fn bar(quiet: bool, what: &str) -> ProgressBar {
    if quiet {
        return ProgressBar::hidden();
    }
    let bar = ProgressBar::new(1);
    bar.set_style(ProgressStyle::with_template("{msg} [{bar:32}] {pos}/{len} files, {elapsed} (time left {eta})").unwrap().progress_chars("=> "));
    bar.set_message(what.to_string());
    bar
}

/// `--labels FILE:COLUMN`.
fn labels_of(l: &str) -> Result<(PathBuf, String)> {
    match Groups::parse(l) {
        Ok(Groups::Manifest { file, column }) => Ok((file, column)),
        _ => bail!("--labels {l}: give FILE:COLUMN (e.g. manifest.csv:label)"),
    }
}

fn kinds(names: &[String]) -> Result<Vec<RegionKind>> {
    let all = [RegionKind::BorderBand, RegionKind::BurnedInMark, RegionKind::RepeatedPatch, RegionKind::DrawnRegion];
    names
        .iter()
        .map(|n| {
            all.iter().copied().find(|k| k.slug() == n.trim()).with_context(|| {
                format!("--kinds {n}: use border-band, burned-in-mark, repeated-patch or drawn-region (comma-separated)")
            })
        })
        .collect()
}

pub fn run(a: &CleanArgs) -> Result<()> {
    if a.ledger.is_none() && a.sweep.is_none() {
        bail!("say what to paint out: give --ledger (the images a curator marked) and/or --sweep (the images a sweep found above your limits)");
    }
    if let Some(n) = a.threads {
        if n == 0 {
            bail!("--threads must be 1 or more");
        }
        rayon::ThreadPoolBuilder::new().num_threads(n).build_global().context("cannot set up the worker threads")?;
    }
    let model = match &a.check {
        Some(m) => Some(super::ModelArgs { model: m.clone(), how: super::ModelHow { feed: a.feed.clone(), ..Default::default() } }),
        None => None,
    };
    let loaded = model.as_ref().map(|m| -> Result<_> {
        let model = m.load()?;
        let card: FeedCard = m.card(&model)?;
        Ok((model, card))
    });
    let loaded = loaded.transpose()?;
    // Regions are found on the file's own first window (a sweep's on the sweep's window); the
    // model in --check is fed through its card's window.
    let open = OpenOptions { frame: a.frame, window: None };
    let verdicts = if a.verdict.is_empty() {
        vec![Verdict::Marked]
    } else {
        a.verdict.iter().map(|v| Verdict::parse(v)?.with_context(|| format!("--verdict {v}: name a verdict"))).collect::<Result<Vec<_>>>()?
    };
    let ledger = a
        .ledger
        .as_deref()
        .map(|l| LedgerSource::open(l, verdicts, LedgerRegions::parse(&a.ledger_regions)?, FinderSettings::default()))
        .transpose()?;
    let limits = Limits { suspect: a.suspect, min_mark_share: a.min_mark_share, min_lift: a.min_lift, min_drop: a.min_drop, flipped: a.flipped };
    let sweep = a.sweep.as_deref().map(|s| SweepSource::open(s, limits)).transpose()?;
    let mut sources: Vec<&dyn Source> = vec![];
    if let Some(l) = &ledger {
        sources.push(l);
    }
    if let Some(s) = &sweep {
        eprintln!("{} of the sweep's images pass the limits", s.picked_count());
        sources.push(s);
    }
    let job = Job {
        images: a.images.clone(),
        out: a.out.clone(),
        exclude: a.exclude.clone(),
        sources,
        open,
        kinds: kinds(&a.kinds)?,
        min_confidence: a.min_confidence,
    };
    let pb = bar(a.quiet, "cleaning");
    let ctl = super::explain::control_for(&pb);
    let outcome = match clean::run(&job, &ctl) {
        Ok(o) => o,
        Err(e) if crate::model::is_cancelled(&e) => {
            pb.abandon();
            eprintln!("spurion: the files done before the cancel are kept in {}; run the same command again to go on", a.out.display());
            return Err(e);
        }
        Err(e) => return Err(e),
    };
    pb.finish_and_clear();
    println!(
        "{} files: {} cleaned ({} pixels changed), {} picked with nothing to paint, {} copied{}",
        outcome.files,
        outcome.cleaned,
        outcome.pixels_changed,
        outcome.picked_no_region,
        outcome.copied,
        if outcome.resumed > 0 { format!("; {} were done by an earlier run", outcome.resumed) } else { String::new() }
    );
    if outcome.links_skipped > 0 {
        println!("note: {} symbolic links in {} were not followed and not copied", outcome.links_skipped, a.images.display());
    }
    let mut notes: Vec<&str> = outcome.notes.iter().map(|(_, n)| n.as_str()).collect();
    notes.sort();
    notes.dedup();
    for n in notes {
        let count = outcome.notes.iter().filter(|(_, m)| m == n).count();
        println!("note ({count} files): {n}");
    }
    println!("wrote {} ({}, {})", a.out.display(), clean::store::MANIFEST, clean::store::SUMMARY);
    if let Some((model, card)) = &loaded {
        let records = clean::records(&a.out)?;
        let painted = |rel: &str| records.get(rel).is_some_and(|r| r.action == clean::Action::Cleaned);
        let setup = CheckSetup {
            model,
            card,
            open: OpenOptions { frame: a.frame, window: card.input.window.clone() },
            groups: match &a.groups {
                Some(g) => Groups::parse(g)?,
                None => Groups::Folders,
            },
            exclude: a.exclude.clone(),
            labels: a.labels.as_deref().map(labels_of).transpose()?,
        };
        let pb = bar(a.quiet, "checking");
        let ctl = super::explain::control_for(&pb);
        let result = check(&setup, &a.images, &a.out, &painted, &ctl)?;
        pb.finish_and_clear();
        let text = crate::report::clean::write_check(&a.out, &result)?;
        print!("{text}");
        println!("wrote {} ({}, {})", a.out.display(), clean::store::CHECK_JSON, clean::store::CHECK_TEXT);
    }
    Ok(())
}
