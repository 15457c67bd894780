//! `spurion explain`: one reading, written as reading.json, map.npy, map.png and overlay.png.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use clap::Args;
use indicatif::{ProgressBar, ProgressStyle};
use ndarray::{Array2, Array3, Axis};

use super::{InputArgs, ModelArgs, load_input};
use crate::control::Control;
use super::reading_args::ReadingArgs;
use crate::ledger::Ledger;
use crate::methods::{self, Input};
use crate::regions::Region;
use crate::report::ReadingFile;
use crate::sign::Sign;

#[derive(Args, Debug)]
pub struct ExplainArgs {
    #[command(flatten)]
    pub model: ModelArgs,
    #[command(flatten)]
    pub input: InputArgs,
    #[command(flatten)]
    pub reading: ReadingArgs,
    /// Folder for the reading's files (default: reading-<input name>-<method>, or with -2, -3, … added
    /// when that folder is already there: an earlier result is never written over).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Which sign the pictures show: supporting | opposing | both | magnitude.
    #[arg(long, default_value = crate::methods::defaults::SIGN_TEXT)]
    pub sign: String,
    /// Tint opacity in overlay.png, 0..1.
    #[arg(long, default_value_t = crate::methods::defaults::OPACITY)]
    pub opacity: f32,
    /// No progress bar.
    #[arg(long, short = 'q')]
    pub quiet: bool,
    /// A ledger whose drawn regions for this image join the found regions: figures, removal
    /// and the suspect flag.
    #[arg(long, value_name = "LEDGER")]
    pub ledger: Option<PathBuf>,
    /// Write the DICOM file's patient-identifying attributes into reading.json (they are left
    /// out unless this is given; the file then says it holds them).
    #[arg(long)]
    pub with_patient_data: bool,
}

pub(crate) fn progress_bar(what: &str) -> ProgressBar {
    let bar = ProgressBar::new(1);
    bar.set_style(
        ProgressStyle::with_template("{msg} [{bar:32}] {pos}/{len} passes, {elapsed} (eta {eta})")
            .unwrap()
            .progress_chars("=> "),
    );
    bar.set_message(what.to_string());
    bar
}

/// A control that drives the progress bar and is cancelled by Ctrl-C.
pub(crate) fn control_for(bar: &ProgressBar) -> Control {
    static CURRENT: std::sync::OnceLock<std::sync::Mutex<Option<Control>>> = std::sync::OnceLock::new();
    let b = bar.clone();
    let ctl = Control::with_callback(move |done, total| {
        b.set_length(total);
        b.set_position(done);
    });
    let slot = CURRENT.get_or_init(|| {
        // Failing to install the handler only loses Ctrl-C cancelling (the default kill
        // remains), so it is not worth stopping the command for.
        ctrlc::set_handler(|| {
            if let Some(c) = CURRENT.get().and_then(|m| m.lock().ok()).and_then(|g| g.clone()) {
                c.cancel();
            }
        })
        .ok();
        std::sync::Mutex::new(None)
    });
    *slot.lock().unwrap() = Some(ctl.clone());
    ctl
}

fn parse_sign(s: &str) -> Result<Sign> {
    Sign::parse(s).with_context(|| format!("unknown sign \"{s}\"; use both, supporting, opposing or magnitude"))
}

/// What one `explain` computes before anything is written: shared by the command and the
/// Python package, so both give the same reading of the same image.
pub struct Explained {
    pub input: Input,
    pub reading: methods::Reading,
    pub assessment: Option<crate::regions::Assessment>,
}

/// The reading the command makes for these flags: model, input, drawn regions from the ledger,
/// the method and the assessment of its regions.
pub fn compute(a: &ExplainArgs, ctl: &Control) -> Result<Explained> {
    let req = a.reading.request()?;
    let model = a.model.load_for(&a.input)?;
    let (input, card) = load_input(&model, &a.model, &a.input)?;
    if let (Some(c), Some(_)) = (&card, &a.input.image) {
        super::warn_guessed_feed(c, &model);
    }
    let drawn = drawn_regions(a, &input)?;
    compute_on(&model, card.as_ref(), input, drawn, &req, ctl)
}

/// The reading of an input already fed, with the regions drawn on it.
pub fn compute_on(
    model: &crate::model::Model,
    card: Option<&crate::feed::FeedCard>,
    input: Input,
    drawn: Vec<Region>,
    req: &methods::Request,
    ctl: &Control,
) -> Result<Explained> {
    let reading = methods::explain(model, card, &input, req, ctl)?;
    let assessment = methods::assess_input(model, card, &input, &reading, drawn, &Default::default(), &Default::default())?;
    Ok(Explained { input, reading, assessment })
}

/// The regions `--ledger` draws on the image being read (none without it).
pub fn drawn_regions(a: &ExplainArgs, input: &Input) -> Result<Vec<Region>> {
    match &a.ledger {
        Some(l) => drawn_from_ledger(l, &a.input, input),
        None => Ok(Vec::new()),
    }
}

/// reading.json's content.
pub fn reading_json(e: &Explained, with_patient_data: bool) -> Result<serde_json::Value> {
    ReadingFile::new(&e.reading, e.assessment.clone()).with_input(&e.input, with_patient_data).to_json()
}

/// Writes reading.json, map.npy, map.png and overlay.png into `out`.
pub fn write_files(a: &ExplainArgs, e: &Explained, out: &Path) -> Result<()> {
    let sign = parse_sign(&a.sign)?;
    std::fs::create_dir_all(out).with_context(|| format!("cannot create output folder {}", out.display()))?;
    let map2 = e.reading.map2d();
    write_json(&out.join("reading.json"), &reading_json(e, a.with_patient_data)?)?;
    crate::feed::write_tensor(&out.join("map.npy"), &e.reading.map)?;
    crate::render::write_map_png(&out.join("map.png"), &map2, sign)?;
    let backdrop = backdrop(&e.input, &map2);
    crate::render::write_overlay_png(&out.join("overlay.png"), &backdrop, &map2, sign, a.opacity)
}

pub fn run(a: &ExplainArgs) -> Result<()> {
    let req = a.reading.request()?;
    parse_sign(&a.sign)?;
    if !(0.0..=1.0).contains(&a.opacity) {
        bail!("--opacity must be between 0 and 1");
    }
    let bar = if a.quiet { ProgressBar::hidden() } else { progress_bar(req.method.name()) };
    let ctl = control_for(&bar);
    let e = compute(a, &ctl)?;
    bar.finish_and_clear();
    let out = a.out.clone().unwrap_or_else(|| unused_folder(default_out(&e.input, &e.reading.method)));
    write_files(a, &e, &out)?;
    let reading = &e.reading;
    let suspect = e.assessment.as_ref().map(|a| (a.suspect, a.reason.clone()));
    let hotspots = e.assessment.as_ref().map(|a| a.hotspots.clone()).unwrap_or_default();

    println!("{} on {} ({}), target {} \"{}\"", reading.method, reading.input, reading.model_file, reading.target.index, reading.target.label);
    if let Some(b) = &reading.baseline {
        println!("baseline {b}");
    }
    println!(
        "score at input {:.6}{}",
        reading.score_input,
        reading.score_baseline.map(|s| format!(", at baseline {s:.6}")).unwrap_or_default()
    );
    println!(
        "attribution sum {:.6}{}",
        reading.attribution_sum,
        reading
            .completeness_gap
            .map(|g| format!(", completeness gap {:.3}% ({} steps)", g * 100.0, reading.steps.unwrap_or(0)))
            .unwrap_or_default()
    );
    if let (Some(_), Some(fb)) = (reading.completeness_gap, reading.score_baseline) {
        let diff = (reading.score_input - fb) as f64;
        let mass: f64 = reading.tensor_map.iter().map(|v| v.abs() as f64).sum();
        if diff.abs() < methods::defaults::IG_GAP_FLOOR * mass {
            println!(
                "note: F(x) − F(x′) = {diff:.6} is small beside the map's total absolute attribution {mass:.4}, so the \
                 relative gap is ill-conditioned; the refinement held the error under 1% of {:.6} instead",
                methods::defaults::IG_GAP_FLOOR * mass
            );
        }
    }
    if let Some(c) = &reading.completeness {
        if let (Some(t), Some(r)) = (c.target, c.reached) {
            println!(
                "completeness: target {:.2} % {} ({} gradients, {} forwards, cap {})",
                t * 100.0,
                if r { "reached" } else { "NOT reached" },
                c.steps,
                c.forwards,
                c.cap.unwrap_or(c.steps)
            );
        }
    }
    if let Some(s) = reading.completeness_shortfall() {
        println!("WARNING: {s}");
    }
    // The IG paper's advice is a gap within 5% (Sundararajan et al. 2017, section 3). A refined
    // reading that reached its target with a larger relative gap did so against the floor of an
    // ill-conditioned gap, which the note above explains; saying both would contradict it.
    let reached = reading.completeness.as_ref().and_then(|c| c.reached) == Some(true);
    if let Some(g) = reading.completeness_gap.filter(|g| *g > 0.05 && !reached) {
        println!(
            "note: a completeness gap of {:.1}% means the steps do not resolve the path integral; \
             raise --steps or add --adaptive before reading the map",
            g * 100.0
        );
    }
    for h in &hotspots {
        println!("{}", hotspot_line(h));
    }
    if let Some((flag, why)) = suspect {
        println!("{}", if flag { format!("SUSPECT: {why}") } else { format!("not suspect: {why}") });
    }
    println!("wrote {} (reading.json, map.npy, map.png, overlay.png) in {:.0} ms", out.display(), reading.elapsed_ms);
    Ok(())
}

/// One hotspot for the terminal: where, how much of the map, how mark-like, what removal did.
fn hotspot_line(h: &crate::regions::HotspotReport) -> String {
    let d = &h.descriptor;
    let removal = h
        .removal
        .as_ref()
        .map(|r| format!("; painted out: probability drop {:.2}, top class after {}", r.probability_drop, r.top_class()))
        .unwrap_or_default();
    format!(
        "{}: share {:.2}, mark-likeness {:.2} (saturation {:.2}, edge sharpness {:.2}, thinness {:.2}, outside foreground {:.2}){removal} -> {}",
        h.label(),
        h.share,
        h.mark_likeness,
        d.saturation,
        d.edge_sharpness,
        d.thinness,
        d.outside_foreground,
        h.role.name()
    )
}

/// The drawn regions a ledger keeps for the image being read, on its grid.
fn drawn_from_ledger(path: &Path, args: &InputArgs, input: &Input) -> Result<Vec<Region>> {
    let (Some(image), Input::Picture { picture, .. }) = (&args.image, input) else {
        bail!("--ledger gives drawn regions on an image; a --tensor has none (give --image instead)");
    };
    let ledger = Ledger::open(&Ledger::file_for(path))?;
    let key = ledger.key_for(image)?;
    let regions = ledger.drawn_regions_for(&key, picture.height(), picture.width())?;
    let verdict = ledger.verdict(&key).map_or("no verdict".to_string(), |v| format!("verdict {v}"));
    eprintln!("ledger {}: {key} has {} drawn region{} and {verdict}", ledger.path().display(), regions.len(), if regions.len() == 1 { "" } else { "s" });
    Ok(regions)
}

fn default_out(input: &Input, method: &str) -> PathBuf {
    let name = input.name();
    let stem = Path::new(&name).file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or(name);
    PathBuf::from(format!("reading-{stem}-{method}"))
}

/// `base`, or when a folder of that name is already there (an earlier run without `--out`),
/// the first free `base-2`, `base-3`, … so that no earlier result is written over; says so.
pub(crate) fn unused_folder(base: PathBuf) -> PathBuf {
    if !base.exists() {
        return base;
    }
    let free = (2..).map(|k| PathBuf::from(format!("{}-{k}", base.display()))).find(|p| !p.exists()).expect("some number is free");
    eprintln!(
        "note: {} already holds an earlier result, kept as it is; this one goes into {} (give --out to choose)",
        base.display(),
        free.display()
    );
    free
}

pub(super) fn write_json(path: &Path, v: &serde_json::Value) -> Result<()> {
    let tmp = path.with_extension("json.part");
    std::fs::write(&tmp, serde_json::to_string_pretty(v)? + "\n")
        .with_context(|| format!("cannot write {}", tmp.display()))?;
    std::fs::rename(&tmp, path).with_context(|| format!("cannot write {}", path.display()))
}

/// What the overlay is drawn on: the picture, or a tensor's channel mean scaled to 0..1.
pub(super) fn backdrop(input: &Input, map2: &Array2<f32>) -> Array3<f32> {
    match input {
        Input::Picture { picture, .. } => picture.pixels.clone(),
        Input::Tensor { tensor, .. } => {
            // The mean over the non-spatial axes (channels), wherever the layout puts them.
            let (h, w) = map2.dim();
            let plane = input
                .spatial_axes()
                .ok()
                .and_then(|[ay, ax]| {
                    let mut m = tensor.clone();
                    for a in (0..m.ndim()).rev().filter(|a| *a != ay && *a != ax) {
                        m = m.mean_axis(Axis(a))?;
                    }
                    let m = m.into_dimensionality::<ndarray::Ix2>().ok()?;
                    let m = if ay < ax { m } else { m.reversed_axes() };
                    (m.dim() == (h, w)).then_some(m)
                })
                .unwrap_or_else(|| Array2::zeros((h, w)));
            let (lo, hi) = plane.iter().fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), v| (a.min(*v), b.max(*v)));
            let span = (hi - lo).max(f32::EPSILON);
            Array3::from_shape_fn((h, w, 1), |(y, x, _)| (plane[[y, x]] - lo) / span)
        }
    }
}
