//! The command line: a thin layer over the library. Every error names the file, what is wrong
//! and what to do; exit codes: 0 done, 1 bad input or failed computation, 2 usage error, 130
//! cancelled with Ctrl-C.

mod card;
mod clean;
pub mod explain;
mod feed;
pub mod ledger;
mod reading_args;
mod regions;
pub mod review;
pub mod sweep;

pub use reading_args::ReadingArgs;

use std::path::PathBuf;

use anyhow::{Context, Result};
use clap::{Args, Parser, Subcommand};

use crate::model::{LoadOptions, Model};

#[derive(Parser, Debug)]
#[command(
    name = "spurion",
    version,
    about = "Shows what an image classifier is looking at, and catches it when the answer is a shortcut.",
    long_about = None,
    after_help = format!(
        "With no command, spurion opens the desktop inspector on the bundled demo.\n\n\
         Exit codes: 0 done, 1 bad input or failed computation, 2 usage error, 130 cancelled.\n\n{}",
        crate::CAUTION
    )
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Option<Command>,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Inputs, outputs and ops of a model, and which ops have a reverse step.
    Info(InfoArgs),
    /// Raw output values of a model for one image or tensor.
    Predict(PredictArgs),
    /// One reading: an attribution map for one image or tensor, written to a folder.
    Explain(explain::ExplainArgs),
    /// A reading and the tests a reviewer runs on it: deletion and insertion curves, the
    /// randomisation cascade, integrated gradients' convergence, region Shapley values, and
    /// optionally a second model; written as review.json and review.png.
    Review(review::ReviewArgs),
    /// Two sweeps' output folders compared group by group (suspect rate, mark share, flip rate).
    CompareSweeps(review::CompareArgs),
    /// Border bands and burned-in marks of an image, found without any model.
    Regions(RegionsArgs),
    /// An image exactly as it is decoded and windowed for the model (before resizing and
    /// normalisation), as a float32 .npy; with --from-reading, the model-input tensor a reading
    /// was made of, again from its reading.json.
    Feed(feed::FeedArgs),
    /// Writes a model's feed card (MODEL.feed.toml) in one step: size, layout and channels from
    /// the graph, the normalisation from a preset or --mean/--std, labels from a text file.
    Card(card::CardArgs),
    /// One reading per image over a folder: a table, each group's atlas and a self-contained
    /// report; resumable, and sliced into shards for a cluster's scheduler.
    Sweep(sweep::SweepArgs),
    /// Joins the outputs of a sweep's shards into the files an unsharded sweep writes.
    SweepMerge(sweep::MergeArgs),
    /// The curator's ledger: verdicts, notes and drawn regions per image, saved at once.
    Ledger(ledger::LedgerArgs),
    /// A cleaned copy of a folder: the marks a ledger or a sweep picked painted out, DICOM kept
    /// valid, a manifest of every change; resumable. --check MODEL reports what the model does
    /// without the marks.
    Clean(clean::CleanArgs),
    /// Writes a demo set of phantom images with ground-truth masks and a manifest.
    Demo(DemoArgs),
    /// Opens the desktop inspector.
    Gui(GuiArgs),
}

#[derive(Args, Debug, Clone)]
pub struct ModelArgs {
    /// The ONNX model file.
    #[arg(long, short = 'm')]
    pub model: PathBuf,
    #[command(flatten)]
    pub how: ModelHow,
}

/// How a model is loaded and fed, beside its file.
#[derive(Args, Debug, Clone, Default)]
pub struct ModelHow {
    /// Input shape, e.g. 1,3,224,224, for models with dynamic input dimensions.
    #[arg(long, value_delimiter = ',')]
    pub input_shape: Option<Vec<usize>>,
    /// Feed card to use instead of the sidecar MODEL.feed.toml.
    #[arg(long)]
    pub feed: Option<PathBuf>,
    /// The model output to explain, by its ONNX name, for models with several outputs (when it
    /// is needed, the refusal lists them); overrides the feed card's `[output] name`.
    #[arg(long)]
    pub output: Option<String>,
}

impl ModelArgs {
    /// The model with the input shape given, or its feed card's.
    pub fn load(&self) -> Result<Model> {
        Model::load(&self.model, &self.options(self.given_shape()))
    }

    /// Load options: the input shape, and which output to score (`--output`, else the feed
    /// card's `[output] name`; the card's label count picks among class-shaped outputs).
    fn options(&self, input_shape: Option<Vec<usize>>) -> LoadOptions {
        let card = self.card_path().and_then(|p| crate::feed::FeedCard::load(&p).ok());
        let output = self.how.output.clone().or_else(|| card.as_ref().and_then(|c| c.output.name.clone()));
        let classes = card.map(|c| c.output.labels.len()).filter(|&n| n > 0);
        LoadOptions { input_shape, output, classes }
    }

    /// The model for `input`: where neither `--input-shape` nor a feed card fixes the graph's
    /// dynamic input dimensions, the tensor's shape does, or an image's height and width.
    pub fn load_for(&self, input: &InputArgs) -> Result<Model> {
        let shape = match self.given_shape() {
            Some(s) => Some(s),
            None => self.shape_from_input(input)?,
        };
        Model::load(&self.model, &self.options(shape))
    }

    fn given_shape(&self) -> Option<Vec<usize>> {
        self.how.input_shape.clone().or_else(|| {
            // A feed card fixes the input shape of a model with dynamic dimensions.
            self.card_path().and_then(|p| crate::feed::FeedCard::load(&p).ok()).map(|c| c.tensor_shape())
        })
    }

    fn shape_from_input(&self, input: &InputArgs) -> Result<Option<Vec<usize>>> {
        let dims = crate::model::input_dims(&self.model)?;
        if dims.iter().skip(1).all(Option::is_some) {
            return Ok(None);
        }
        if let Some(t) = &input.tensor {
            return Ok(Some(crate::feed::read_tensor(t)?.shape().to_vec()));
        }
        let Some(path) = &input.image else { return Ok(None) };
        if dims.len() != 4 {
            return Ok(None);
        }
        let pic = crate::feed::Picture::open(path)?;
        let (h, w) = (pic.height(), pic.width());
        // The channel axis is the one the graph fixes at 1 or 3; the other two take the image's size.
        let fill = |d: Option<usize>, v: usize| d.unwrap_or(v);
        Ok(match (dims[1], dims[3]) {
            (Some(c @ (1 | 3)), _) => Some(vec![1, c, fill(dims[2], h), fill(dims[3], w)]),
            (_, Some(c @ (1 | 3))) => Some(vec![1, fill(dims[1], h), fill(dims[2], w), c]),
            _ => None,
        })
    }

    /// The feed card file in use: the one named, or the sidecar where it exists.
    pub fn card_path(&self) -> Option<PathBuf> {
        self.how.feed.clone().or_else(|| {
            let p = crate::feed::FeedCard::sidecar_path(&self.model);
            p.exists().then_some(p)
        })
    }

    /// The feed card: the one named, the sidecar, or one inferred from the graph.
    pub fn card(&self, model: &Model) -> Result<crate::feed::FeedCard> {
        use crate::feed::FeedCard;
        let file = match &self.how.feed {
            Some(p) => Some(FeedCard::load(p)?),
            None => FeedCard::for_model(&self.model)?,
        };
        match file {
            Some(mut c) => {
                // --output overrides the card's `[output] name` (the model was loaded so).
                if self.how.output.is_some() {
                    c.output.name = self.how.output.clone();
                }
                c.for_model_graph(model)
            }
            None => FeedCard::for_loaded(model),
        }
    }
}

#[derive(Args, Debug)]
pub struct InfoArgs {
    /// The ONNX model file (`spurion info model.onnx`; `--model` says the same).
    #[arg(value_name = "MODEL", conflicts_with = "model", required_unless_present = "model")]
    pub file: Option<PathBuf>,
    /// The ONNX model file.
    #[arg(long, short = 'm')]
    pub model: Option<PathBuf>,
    #[command(flatten)]
    pub how: ModelHow,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

impl InfoArgs {
    /// The model's arguments as every other command takes them.
    fn model_args(&self) -> ModelArgs {
        // clap requires one of the two, so the fallback is never used.
        let model = self.file.clone().or_else(|| self.model.clone()).unwrap_or_default();
        ModelArgs { model, how: self.how.clone() }
    }
}

#[derive(Args, Debug)]
pub struct InputArgs {
    /// An image (PNG 8/16-bit, JPEG, TIFF, BMP, DICOM), fed through the feed card.
    #[arg(long, short = 'i', conflicts_with = "tensor", required_unless_present = "tensor")]
    pub image: Option<PathBuf>,
    /// A NumPy .npy tensor fed exactly as the model input (no feed card).
    #[arg(long)]
    pub tensor: Option<PathBuf>,
    /// The frame of a multi-frame DICOM file, from 0.
    #[arg(long, default_value_t = 0)]
    pub frame: usize,
}

#[derive(Args, Debug)]
pub struct PredictArgs {
    #[command(flatten)]
    pub model: ModelArgs,
    #[command(flatten)]
    pub input: InputArgs,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Args, Debug)]
pub struct RegionsArgs {
    /// The image to search.
    #[arg(long, short = 'i')]
    pub image: PathBuf,
    /// Folder for regions.json and one mask PNG per region (default: print JSON only).
    #[arg(long)]
    pub out: Option<PathBuf>,
}

#[derive(Args, Debug)]
pub struct DemoArgs {
    /// Folder to write into (created if missing).
    #[arg(long)]
    pub out: PathBuf,
    /// How many images.
    #[arg(long, default_value_t = 36)]
    pub count: usize,
    /// Seed of the whole set.
    #[arg(long, default_value_t = 1)]
    pub seed: u64,
    /// How sites and labels are drawn: stratified (equal counts of each site and label),
    /// pooled (Hillmoor mostly positive, as the cooperative's data) or even (every site half positive).
    #[arg(long, default_value = "stratified", value_parser = clap::builder::PossibleValuesParser::new(crate::demo::Mix::NAMES))]
    pub mix: String,
    /// Which images carry Hillmoor's tag and frame: by-site, none, all, or swapped (exactly the negatives).
    #[arg(long, default_value = "by-site", value_parser = clap::builder::PossibleValuesParser::new(crate::demo::Marks::NAMES))]
    pub marks: String,
    /// Nominal peak brightening of an opacity, in 8-bit grey levels.
    #[arg(long, default_value_t = crate::demo::DEFAULT_CONTRAST)]
    pub contrast: f32,
    /// Image side in pixels.
    #[arg(long, default_value_t = crate::demo::DEFAULT_SIZE)]
    pub size: usize,
    /// Skip the ground-truth masks (for large training sets).
    #[arg(long)]
    pub no_masks: bool,
    /// Also write DICOM copies of the first N images into OUT/dicom (invented patient data,
    /// a demo UID root; Burned In Annotation YES where Hillmoor's tag is burned in). In a set
    /// without --by-site they lie below the PNGs they copy: sweep it with --exclude dicom.
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub dicom: usize,
    /// Write the images into one folder per site below OUT/images (images/hillmoor/...), the way
    /// a sweep groups them; the manifest's `file` column then holds those paths.
    #[arg(long)]
    pub by_site: bool,
    /// Add N images from Fellbrook, the site that joins later, after the COUNT of the founding
    /// sites: a bare side letter in a corner that changes from image to image, and on some a
    /// ruler along one edge. Off by default: the sample models were measured on sets without.
    #[arg(long, default_value_t = 0, value_name = "N")]
    pub fellbrook: usize,
    /// Let Hillmoor's senior reader ring some findings with a thin bright circle or point at
    /// them with an arrow. Off by default, for the same reason.
    #[arg(long)]
    pub reader_marks: bool,
    /// Put one mark on images by their label, on any site: KIND:POSITIVE:NEGATIVE, the shares
    /// of images with and without a finding that carry it (KIND: letter, ring, ruler, arrow;
    /// a ring or arrow on a negative goes around a place in a lung). ring:0.9:0.1 makes a
    /// shortcut to learn, ring:0.3:0.3 a control set; the same seed with ring:0:0 gives the
    /// same images without it. Off by default.
    #[arg(long, value_name = "KIND:POS:NEG")]
    pub plant: Option<String>,
}

#[derive(Args, Debug)]
pub struct GuiArgs {
    /// Model to open (default: the bundled shortcut sample model).
    #[arg(long, short = 'm')]
    pub model: Option<PathBuf>,
    /// Images or folders to open.
    pub paths: Vec<PathBuf>,
    /// The ledger to keep verdicts in: a file, or a folder (its spurion-ledger.json). Default:
    /// the one in the first folder opened.
    #[arg(long)]
    pub ledger: Option<PathBuf>,
}

/// Runs one command; the binary maps errors to exit code 1. `gui` (and no command at all) is
/// the binary's to start: the command line does not depend on the inspector.
pub fn run(command: Command) -> Result<()> {
    match command {
        Command::Gui(_) => anyhow::bail!("`spurion gui` is started by the spurion binary, not by the command-line module"),
        Command::Info(a) => info(&a),
        Command::Predict(a) => predict(&a),
        Command::Explain(a) => explain::run(&a),
        Command::Review(a) => review::run(&a),
        Command::CompareSweeps(a) => review::compare(&a),
        Command::Regions(a) => regions::run(&a.image, a.out.as_deref(), &Default::default()),
        Command::Demo(a) => demo(&a),
        Command::Feed(a) => feed::run(&a),
        Command::Card(a) => card::run(&a),
        Command::Sweep(a) => sweep::run(&a),
        Command::SweepMerge(a) => sweep::merge(&a),
        Command::Ledger(a) => ledger::run(&a),
        Command::Clean(a) => clean::run(&a),
    }
}

/// Says once, on the terminal, that the feed is only guessed (see `FeedCard::guess_warning`).
pub(crate) fn warn_guessed_feed(card: &crate::feed::FeedCard, model: &Model) {
    if let Some(w) = card.guess_warning(model.path()) {
        eprintln!("warning: {w}");
    }
}

fn info(a: &InfoArgs) -> Result<()> {
    let model = a.model_args();
    let m = model.load()?;
    let info = m.info();
    // The feed a reading of an image would use (a model that takes no image has none).
    let feed = model.card(&m).map(|c| c.summary(m.path()));
    if a.json {
        let mut v = serde_json::to_value(&info)?;
        v["feed"] = match &feed {
            Ok(f) => serde_json::to_value(f)?,
            Err(e) => serde_json::json!({ "none": format!("{e:#}") }),
        };
        println!("{}", serde_json::to_string_pretty(&v)?);
        return Ok(());
    }
    println!("model    {}", info.path.display());
    println!("sha256   {}", info.sha256);
    for t in &info.inputs {
        println!("input    {}  {:?}", t.name, t.shape);
    }
    for t in &info.outputs {
        let scored = if t.name == info.scored_output && info.outputs.len() > 1 { "  (scored)" } else { "" };
        println!("output   {}  {:?}{scored}", t.name, t.shape);
    }
    println!("ends in softmax: {}", if info.ends_in_softmax { "yes" } else { "no" });
    println!("\nfeed of an image (each value's origin in brackets: card, graph or default):");
    match &feed {
        Ok(f) => {
            for l in f.lines() {
                println!("  {l}");
            }
            if let Some(w) = &f.warning {
                println!("warning: {w}");
            }
        }
        Err(e) => println!("  none: {e:#}"),
    }
    println!("\nONNX operators:");
    for o in &info.onnx_ops {
        println!("  {:<28} {:>5}", o.op, o.count);
    }
    println!("\nops of the graph the reverse pass walks:");
    for o in &info.ops {
        let r = match o.reverse_step {
            Some(true) => "reverse step",
            Some(false) => "NO reverse step",
            None => "",
        };
        println!("  {:<28} {:>5}  {}", o.op, o.count, r);
    }
    if info.gradient_ready {
        println!("\ngradients: ready (all methods available)");
    } else {
        println!("\ngradients: not available; occlusion still works. Nodes without a reverse step:");
        for u in &info.unsupported {
            println!("  {} (node \"{}\")", u.op, u.node);
        }
    }
    Ok(())
}

/// The model-input tensor for an image or a tensor file, with the card used (if any).
pub fn load_input(
    model: &Model,
    margs: &ModelArgs,
    input: &InputArgs,
) -> Result<(crate::methods::Input, Option<crate::feed::FeedCard>)> {
    if let Some(t) = &input.tensor {
        let x = crate::feed::read_tensor(t)?;
        if x.shape() != model.input_shape() {
            anyhow::bail!(
                "tensor {} has shape {:?} but model {} takes {:?}. Reshape it, or load the model with \
                 --input-shape if its input dimensions are dynamic.",
                t.display(),
                x.shape(),
                model.path().display(),
                model.input_shape()
            );
        }
        let card = margs.card(model).ok();
        let name = t.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        return Ok((crate::methods::Input::tensor(x, name), card));
    }
    let path = input.image.as_ref().context("give --image or --tensor")?;
    let card = margs.card(model)?;
    let opts = crate::feed::OpenOptions { frame: input.frame, window: card.input.window.clone() };
    let pic = crate::feed::Picture::open_with(path, &opts)?;
    if let Some(w) = crate::feed::enlarge::enlargement_warning(&card, pic.height(), pic.width()) {
        eprintln!("warning: {}: {w}", path.display());
    }
    let inp = crate::methods::Input::picture(pic, &card).with_context(|| format!("image {}", path.display()))?;
    Ok((inp, Some(card)))
}

fn predict(a: &PredictArgs) -> Result<()> {
    let m = a.model.load_for(&a.input)?;
    let (input, card) = load_input(&m, &a.model, &a.input)?;
    if let (Some(c), Some(_)) = (&card, &a.input.image) {
        warn_guessed_feed(c, &m);
    }
    let x = input.model_tensor()?;
    let out = m.forward(&x, crate::model::Tap::Output)?;
    let labels: Vec<String> =
        (0..out.len()).map(|i| card.as_ref().map(|c| c.label(i)).unwrap_or_else(|| format!("class {i}"))).collect();
    if a.json {
        let v = serde_json::json!({
            "model_sha256": m.sha256(),
            "input": input.name(),
            "outputs": out.to_vec(),
            "labels": labels,
        });
        println!("{}", serde_json::to_string_pretty(&v)?);
    } else {
        let wl = labels.iter().map(|l| l.len()).max().unwrap_or(5).max(5);
        println!("{:>5}  {:<wl$}  {:>12}", "index", "label", "output");
        for (i, (v, l)) in out.iter().zip(&labels).enumerate() {
            println!("{i:>5}  {l:<wl$}  {v:>12.6}");
        }
    }
    Ok(())
}

fn demo(a: &DemoArgs) -> Result<()> {
    let spec = crate::demo::SetSpec {
        count: a.count,
        seed: a.seed,
        size: a.size,
        mix: a.mix.parse()?,
        marks: a.marks.parse()?,
        finding_contrast: a.contrast,
        masks: !a.no_masks,
        dicom: a.dicom,
        by_site: a.by_site,
        fellbrook: a.fellbrook,
        reader_marks: a.reader_marks,
        planted: a.plant.as_deref().map(str::parse).transpose()?,
    };
    let bar = explain::progress_bar("writing demo set");
    let ctl = explain::control_for(&bar);
    crate::demo::write_demo_set(&a.out, &spec, &ctl)?;
    bar.finish_and_clear();
    let what = if a.no_masks { "" } else { " with masks" };
    eprintln!("wrote {} images{what} and manifest.csv to {}", spec.total(), a.out.display());
    Ok(())
}
