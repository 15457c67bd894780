//! `spurion card`: a model's feed card in one step, written beside the model.

use std::path::PathBuf;

use anyhow::{Context, Result};
use clap::Args;

use crate::feed::{CardSpec, FeedCard, Preset, Resize};
use crate::model::{LoadOptions, Model};

#[derive(Args, Debug)]
pub struct CardArgs {
    /// The ONNX model file; the card is written beside it as MODEL.feed.toml.
    #[arg(long, short = 'm')]
    pub model: PathBuf,
    /// The normalisation the model was trained with: imagenet (ImageNet mean and std), unit
    /// (0..1), signed-unit (−1..1) or per-image (each picture's own mean and std).
    #[arg(long, value_parser = clap::builder::PossibleValuesParser::new(Preset::NAMES))]
    pub preset: Option<String>,
    /// Per-channel mean on pixels 0..1, comma-separated (one value, or one per channel);
    /// replaces the preset's.
    #[arg(long, value_delimiter = ',', allow_hyphen_values = true)]
    pub mean: Option<Vec<f32>>,
    /// Per-channel standard deviation on pixels 0..1, comma-separated; replaces the preset's.
    #[arg(long, value_delimiter = ',')]
    pub std: Option<Vec<f32>>,
    /// A text file with the class labels, one per line in output order.
    #[arg(long)]
    pub labels: Option<PathBuf>,
    /// How pictures are brought to the model's size: stretch or shorter-side-crop.
    #[arg(long, value_parser = ["stretch", "shorter-side-crop"])]
    pub resize: Option<String>,
    /// Input shape, e.g. 1,3,224,224, for models with dynamic input dimensions.
    #[arg(long, value_delimiter = ',')]
    pub input_shape: Option<Vec<usize>>,
    /// Where to write the card (default: MODEL.feed.toml beside the model).
    #[arg(long)]
    pub out: Option<PathBuf>,
    /// Replace an existing card.
    #[arg(long)]
    pub force: bool,
    /// The output to score, by its ONNX name, for models with several (`spurion info` lists
    /// them); written into the card as `[output] name`.
    #[arg(long)]
    pub output: Option<String>,
}

pub fn run(a: &CardArgs) -> Result<()> {
    let path = a.out.clone().unwrap_or_else(|| FeedCard::sidecar_path(&a.model));
    if path.exists() && !a.force {
        // Before loading the model: the answer does not depend on it.
        anyhow::bail!(
            "{} already exists; spurion card does not overwrite a feed card. Edit it, remove it, or give --force to replace it",
            path.display()
        );
    }
    let model = Model::load(&a.model, &LoadOptions { input_shape: a.input_shape.clone(), output: a.output.clone(), classes: None })?;
    let preset = a.preset.as_deref().map(Preset::parse).transpose()?;
    let spec = CardSpec {
        preset,
        mean: a.mean.clone(),
        std: a.std.clone(),
        labels: a.labels.clone(),
        resize: a.resize.as_deref().map(|r| if r == "stretch" { Resize::Stretch } else { Resize::ShorterSideCrop }),
    };
    let mut card = crate::feed::card_for(&model, &spec)?;
    card.output.name = a.output.clone();
    let how = match (preset, &a.mean) {
        (Some(p), None) => format!("preset {}", p.name()),
        (Some(p), Some(_)) => format!("preset {} with the mean and std given", p.name()),
        (None, _) => "the mean and std given".to_string(),
    };
    let text = crate::feed::card_text(&card, &a.model, &how)?;
    // `--out` may name a folder that is not there yet, as explain's and sweep's do.
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty() && !d.exists()) {
        std::fs::create_dir_all(dir).with_context(|| format!("cannot create the folder {} for the feed card", dir.display()))?;
    }
    crate::feed::write_card(&path, &text, a.force).with_context(|| format!("the feed card of {}", a.model.display()))?;
    println!("wrote {}:\n\n{text}", path.display());
    if let Some(g) = model.input_normalisation() {
        println!(
            "note: the graph already shifts or scales its input ({g}); check that the card's mean and std \
             are not applied a second time"
        );
    }
    Ok(())
}
