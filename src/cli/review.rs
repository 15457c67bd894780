//! `spurion review`: a reading and the tests a reviewer runs on it (deletion and insertion
//! curves, the randomisation cascade, integrated gradients' convergence, region Shapley values,
//! another model), written as review.json and a PNG panel. `spurion compare-sweeps`: two
//! sweeps' outputs compared per group.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use clap::Args;
use clap::builder::RangedU64ValueParser;
use indicatif::ProgressBar;

use super::explain::{backdrop, control_for, progress_bar, write_json};
use super::reading_args::ReadingArgs;
use super::{InputArgs, ModelArgs, load_input};
use crate::methods::catalog::{MethodKind, method_names};
use crate::methods::{Baseline, Method};
use crate::report::{FeedRecord, ReviewFile};
use crate::review::convergence::ConvergenceSettings;
use crate::review::curves::CurveSettings;
use crate::review::randomise::CascadeSettings;
use crate::review::shapley::{Players, ShapleySettings};
use crate::review::{self, Review, Settings, defaults as d};
use crate::sign::Sign;

const TESTS: [&str; 4] = ["curves", "randomisation", "convergence", "shapley"];

#[derive(Args, Debug)]
pub struct ReviewArgs {
    #[command(flatten)]
    pub model: ModelArgs,
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub reading: ReadingArgs,
    /// Baselines of the strip, comma-separated (e.g. black,blur:8,uniform-noise:0): each gets
    /// its own reading and its own curves, filled from it.
    #[arg(long, value_delimiter = ',', value_name = "LIST")]
    pub baselines: Vec<String>,
    /// What fills removed pixels in the curves and absent parts in the Shapley values (a
    /// baseline form; default: the reading's baseline, and in the strip each baseline its own).
    #[arg(long, value_name = "BASELINE")]
    pub fill: Option<String>,
    /// Shapley values of N×N grid cells.
    #[arg(long, default_value_t = d::GRID, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub grid: usize,
    /// Shapley players: grid (the --grid cells) or regions (the found regions and the rest).
    #[arg(long, default_value = "grid", value_parser = ["grid", "regions"])]
    pub players: String,
    /// Orders sampled for the Shapley values (in antithetic pairs); all orders are taken, exactly,
    /// when there are no more than this.
    #[arg(long, default_value_t = d::PERMUTATIONS, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub permutations: usize,
    /// Steps of the deletion and insertion curves (points at 0, 1/N, …, 1 of the pixels).
    #[arg(long, default_value_t = d::CURVE_STEPS, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub curve_steps: usize,
    /// Side of the square patches the curves move together, in model-grid pixels (1: single
    /// pixels, as RISE does; N: N×N regions ranked by the map's sum, as Samek et al. 2017).
    #[arg(long, default_value_t = d::CURVE_PATCH, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub curve_patch: usize,
    /// Random orders averaged for the curves' reference.
    #[arg(long, default_value_t = d::RANDOM_ORDERS, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub random_orders: usize,
    /// Re-draw at most N layers in the randomisation cascade (default: all).
    #[arg(long, value_name = "N", value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub cascade_layers: Option<usize>,
    /// Methods whose maps go through the cascade, comma-separated, or "all" (default: the
    /// reading's method). Each takes the reading's settings.
    #[arg(long, value_delimiter = ',', value_name = "LIST")]
    pub cascade_methods: Vec<String>,
    /// Seed of the random orders, the re-drawn weights and the Shapley orders.
    #[arg(long = "review-seed", default_value_t = d::SEED)]
    pub review_seed: u64,
    /// Largest step count of the convergence ladder (powers of two from 4).
    #[arg(long, default_value_t = d::CONVERGENCE_MAX_STEPS, value_parser = RangedU64ValueParser::<usize>::new().range(1..))]
    pub convergence_max: usize,
    /// Tests to leave out, comma-separated: curves, randomisation, convergence, shapley.
    #[arg(long, value_delimiter = ',', value_name = "LIST")]
    pub skip: Vec<String>,
    /// A second model: the same image and request under it, side by side with agreement figures.
    #[arg(long, value_name = "M2")]
    pub against: Option<PathBuf>,
    /// Feed card of the --against model (default: its sidecar MODEL.feed.toml, else inferred).
    #[arg(long)]
    pub against_feed: Option<PathBuf>,
    /// Folder for review.json and review.png (default: review-<input name>, or with -2, -3, …
    /// added when that folder is already there: an earlier review is never written over).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Which sign the pictures show: supporting | opposing | both | magnitude.
    #[arg(long, default_value = crate::methods::defaults::SIGN_TEXT)]
    pub sign: String,
    /// No progress bar.
    #[arg(long, short = 'q')]
    pub quiet: bool,
}

impl ReviewArgs {
    fn cascade_methods(&self) -> Result<Vec<Method>> {
        let names: Vec<String> = if self.cascade_methods.iter().any(|m| m == "all") {
            crate::methods::catalog::METHODS.iter().map(|m| m.name.to_string()).collect()
        } else {
            self.cascade_methods.clone()
        };
        names
            .iter()
            .map(|n| {
                if MethodKind::parse(n).is_none() {
                    bail!("--cascade-methods: unknown method \"{n}\"; use all or some of: {}", method_names());
                }
                ReadingArgs { method: n.clone(), ..self.reading.clone() }.method()
            })
            .collect()
    }

    fn settings(&self) -> Result<Settings> {
        for s in &self.skip {
            if !TESTS.contains(&s.as_str()) {
                bail!("--skip {s}: not a test; use some of {}", TESTS.join(", "));
            }
        }
        let on = |t: &str| !self.skip.iter().any(|s| s == t);
        let strip = self.baselines.iter().map(|b| Baseline::parse(b)).collect::<Result<Vec<_>>>().context("--baselines")?;
        let s = Settings {
            fill: self.fill.as_deref().map(Baseline::parse).transpose().context("--fill")?,
            curves: on("curves").then(|| CurveSettings { steps: self.curve_steps, random_orders: self.random_orders, seed: self.review_seed, patch: self.curve_patch }),
            strip,
            cascade: on("randomisation").then(|| -> Result<CascadeSettings> {
                Ok(CascadeSettings { layers: self.cascade_layers, seed: self.review_seed, top_share: d::TOP_SHARE, methods: self.cascade_methods()? })
            }).transpose()?,
            convergence: on("convergence")
                .then(|| -> Result<ConvergenceSettings> {
                    // The gap to reach: the one the reading refines to, if it does.
                    let target_gap = match self.reading.method()? {
                        Method::IntegratedGradients { adaptive: Some(g), .. } => g as f64,
                        _ => d::CONVERGENCE_GAP,
                    };
                    Ok(ConvergenceSettings { min_steps: d::CONVERGENCE_MIN_STEPS.min(self.convergence_max), max_steps: self.convergence_max, target_gap })
                })
                .transpose()?,
            shapley: on("shapley").then(|| ShapleySettings {
                players: if self.players == "regions" { Players::Regions } else { Players::Grid(self.grid) },
                permutations: self.permutations,
                seed: self.review_seed,
            }),
            finder: Default::default(),
        };
        review::check(&s)?;
        Ok(s)
    }
}

pub fn run(a: &ReviewArgs) -> Result<()> {
    let bar = if a.quiet { ProgressBar::hidden() } else { progress_bar("reading") };
    let ctl = control_for(&bar);
    let phase_bar = bar.clone();
    let (r, against, out) = compute_and_write(a, &ctl, &move |p| phase_bar.set_message(p.title()))?;
    bar.finish_and_clear();
    print_summary(&r, against.as_ref());
    println!("wrote {} (review.json, review.png)", out.display());
    Ok(())
}

/// `spurion review` without a terminal: the same work and files, progress and cancel through
/// `ctl` (the Python package runs it so). Returns the output folder.
pub fn run_with(a: &ReviewArgs, ctl: &crate::control::Control) -> Result<PathBuf> {
    Ok(compute_and_write(a, ctl, &|_| {})?.2)
}

fn compute_and_write(
    a: &ReviewArgs,
    ctl: &crate::control::Control,
    phase: &dyn Fn(review::Phase),
) -> Result<(Review, Option<review::against::Against>, PathBuf)> {
    let req = a.reading.request()?;
    let sign = Sign::parse(&a.sign).with_context(|| format!("unknown sign \"{}\"; use both, supporting, opposing or magnitude", a.sign))?;
    let settings = a.settings()?;
    let model = a.model.load_for(&a.input)?;
    let (input, card) = load_input(&model, &a.model, &a.input)?;
    if let (Some(c), Some(_)) = (&card, &a.input.image) {
        super::warn_guessed_feed(c, &model);
    }
    // The second model is loaded before any work, so a bad path fails at once.
    let second = match &a.against {
        Some(p) => {
            let margs = ModelArgs { model: p.clone(), how: super::ModelHow { feed: a.against_feed.clone(), ..Default::default() } };
            let m = margs.load_for(&a.input).with_context(|| format!("the --against model {}", p.display()))?;
            let c = if card.is_some() { Some(margs.card(&m).with_context(|| format!("the feed card of {}", p.display()))?) } else { margs.card(&m).ok() };
            Some((m, c))
        }
        None => None,
    };
    let r = review::run(&model, card.as_ref(), &input, &req, &settings, ctl, phase)?;
    let against = match &second {
        Some((m2, c2)) => {
            let case = review::Case::new(&model, card.as_ref(), &input, &req, &r.reading)?;
            Some(review::against::against(&case, &r.reading, m2, c2.as_ref(), &r.regions, d::TOP_SHARE, ctl)?)
        }
        None => None,
    };

    let out = a.out.clone().unwrap_or_else(|| {
        let name = input.name();
        let base = PathBuf::from(format!("review-{}", Path::new(&name).file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or(name)));
        super::explain::unused_folder(base)
    });
    std::fs::create_dir_all(&out).with_context(|| format!("cannot create output folder {} (check permissions or choose another --out)", out.display()))?;
    let case = review::Case::new(&model, card.as_ref(), &input, &req, &r.reading)?;
    write_json(&out.join("review.json"), &ReviewFile::new(&r, case.rule(), against.as_ref()).with_feed(FeedRecord::of_input(&input, model.path())).to_json()?)?;
    let pixels = backdrop(&input, &r.reading.map2d());
    crate::render::save(&out.join("review.png"), &crate::render::review_panel(&r, against.as_ref(), &pixels, sign))?;
    Ok((r, against, out))
}

fn f(v: Option<f64>) -> String {
    v.map(|v| format!("{v:.3}")).unwrap_or_else(|| "—".into())
}

fn print_summary(r: &Review, against: Option<&review::against::Against>) {
    let rd = &r.reading;
    println!("review of {} on {} ({}), class {} \"{}\"", r.request, rd.input, rd.model_file, rd.target.index, rd.target.label);
    println!("score at input {:.4}{}", rd.score_input, rd.score_baseline.map(|b| format!(", at baseline {b:.4}")).unwrap_or_default());
    if let Some(c) = &r.curves {
        for (name, k) in [("deletion", &c.deletion), ("insertion", &c.insertion)] {
            println!("{name:<10} area {:.4} (random {:.4}), lead {} [fill {}]", k.auc, k.random_auc, f(k.lead), c.fill);
        }
    }
    for e in &r.strip {
        println!(
            "  {:<22} deletion lead {}, insertion lead {}, gap {}",
            e.title,
            f(e.curves.deletion.lead),
            f(e.curves.insertion.lead),
            e.reading.completeness_gap.map(|g| format!("{:.2} %", g * 100.0)).unwrap_or_else(|| "—".into())
        );
    }
    if let Some(c) = &r.cascade {
        for mc in &c.methods {
            let steps: Vec<String> = mc.steps.iter().map(|s| format!("{}: ρ {} top {}", s.layers_randomised, f(s.spearman), f(s.top_overlap))).collect();
            println!("randomisation, {}: {}", mc.method, steps.join("; "));
            println!("  {}", mc.verdict);
        }
    }
    if let Some(c) = &r.convergence {
        let reach: Vec<String> = c
            .rules
            .iter()
            .map(|l| format!("{} {}", l.rule.name(), l.steps_to_gap.map(|s| format!("at {s} steps")).unwrap_or_else(|| "not reached".into())))
            .collect();
        println!("convergence to a {} % gap: {}", crate::render::plot::tick_label(c.target_gap * 100.0), reach.join(", "));
    }
    if let Some(s) = &r.shapley {
        let top = s.cells.iter().max_by(|a, b| a.value.abs().total_cmp(&b.value.abs()));
        println!(
            "shapley: sum {:.4} = F(x) − F(fill) {:.4} ({}){}",
            s.sum,
            s.score_input - s.score_baseline,
            s.estimator,
            top.map(|c| format!("; largest {} at {:?}: {:+.4} ± {}", c.label, c.bbox, c.value, f(c.stderr))).unwrap_or_default()
        );
        if let Some(rho) = s.map_agreement {
            println!("  the reading's map summed over the same parts ranks them with Spearman ρ {rho:.3} against the Shapley values");
        }
    }
    if let Some(a) = against {
        let m = &a.agreement[0];
        println!(
            "against {}: top class {} \"{}\"; |map| Spearman {}, top {} % overlap {}; mark share {} against {}",
            a.second.model_file,
            a.second.top,
            a.second.top_label,
            f(m.spearman),
            a.share * 100.0,
            f(m.top_overlap),
            f(a.first.mark_share),
            f(a.second.mark_share)
        );
        for n in &a.notes {
            println!("  note: {n}");
        }
    }
    for w in &r.warnings {
        println!("warning: {w}");
    }
    for s in &r.skipped {
        println!("not run: {}: {}", s.test, s.reason);
    }
}

#[derive(Args, Debug)]
pub struct CompareArgs {
    /// The first sweep's output folder (holding sweep.jsonl).
    pub first: PathBuf,
    /// The second sweep's output folder.
    pub second: PathBuf,
    /// Folder for compare.json (default: print it only).
    #[arg(long)]
    pub out: Option<PathBuf>,
}

pub fn compare(a: &CompareArgs) -> Result<()> {
    let first = review::sweeps::read_rows(&a.first)?;
    let second = review::sweeps::read_rows(&a.second)?;
    let c = review::sweeps::compare(&first, &second);
    let iv = |v: &Option<crate::sweep::stats::Interval>| {
        v.map(|i| format!("{:+.3} [{:+.3}, {:+.3}]", i.estimate, i.low, i.high)).unwrap_or_else(|| "—".into())
    };
    let rate = |v: &Option<crate::sweep::stats::Interval>| v.map(|i| format!("{:.3}", i.estimate)).unwrap_or_else(|| "—".into());
    println!("second minus first, 95 % intervals ({} against {})", a.second.display(), a.first.display());
    println!("{:<16} {:>9} {:>17} {:>30} {:>30} {:>30}", "group", "images", "suspect", "suspect rate", "mean mark share", "flip rate");
    for g in c.groups.iter().chain(std::iter::once(&c.overall)) {
        println!(
            "{:<16} {:>4}/{:<4} {:>4}/{:<4} {}→{} {:>30} {:>30} {:>30}",
            g.group,
            g.images_first,
            g.images_second,
            g.suspect_first,
            g.suspect_second,
            rate(&g.suspect_rate.first),
            rate(&g.suspect_rate.second),
            iv(&g.suspect_rate.difference),
            iv(&g.mark_share.difference),
            iv(&g.flip_rate.difference)
        );
    }
    let json = serde_json::to_value(&c)?;
    match &a.out {
        Some(out) => {
            std::fs::create_dir_all(out).with_context(|| format!("cannot create output folder {}", out.display()))?;
            write_json(&out.join("compare.json"), &json)?;
            println!("wrote {}", out.join("compare.json").display());
        }
        None => println!("{}", serde_json::to_string_pretty(&json)?),
    }
    Ok(())
}
