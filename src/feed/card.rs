//! The feed card: a TOML sidecar saying how an image becomes a model's input tensor.
//!
//! `chest.onnx` is fed by `chest.feed.toml` beside it. Every field has a default so a card can
//! be as short as the one thing the graph cannot tell (usually the normalisation). Example:
//!
//! ```toml
//! [input]
//! layout = "nchw"            # nchw | nhwc
//! channels = 1               # 1 | 3
//! height = 128
//! width = 128
//! resize = "stretch"         # stretch | shorter-side-crop
//! grey_to_rgb = "replicate"  # replicate | refuse  (grey image, 3-channel model; gray_to_rgb also read)
//! scale = "unit"             # unit: pixels 0..1 | byte: pixels 0..255
//! mean = [0.5]               # per channel, subtracted after scaling
//! std = [0.25]               # per channel, divided after the mean
//! normalise = "fixed"        # fixed: mean and std above | per-image: the picture's own mean and std
//! window = "file"            # DICOM / 16-bit: file | { file = N } | { center = C, width = W } | min-max | full-range
//!
//! [output]
//! kind = "logits"            # logits | probabilities
//! labels = ["no finding", "finding present"]
//! name = "logits"            # which graph output holds the scores, for models with several
//! ```

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use serde::{Deserialize, Serialize};

use super::origin::CardOrigin;
use super::window::Windowing;
use crate::model::{LoadOptions, Model};

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Layout {
    Nchw,
    Nhwc,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Resize {
    /// Scale each axis to the model's size, ignoring the aspect ratio.
    Stretch,
    /// Scale so the shorter side fits, then cut the centre.
    ShorterSideCrop,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum GreyRule {
    Replicate,
    Refuse,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Scale {
    /// Pixel values 0..1.
    Unit,
    /// Pixel values 0..255 (16-bit images are scaled down to this range too).
    Byte,
}

/// Where the mean and std come from.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Normalise {
    /// The card's `mean` and `std`.
    #[default]
    Fixed,
    /// The picture's own mean and standard deviation on the model grid, over all pixels and
    /// channels (see `feed::prepare`); the card then gives no mean or std.
    PerImage,
}

impl Normalise {
    fn is_fixed(&self) -> bool {
        *self == Normalise::Fixed
    }
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum OutputKind {
    Logits,
    Probabilities,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct InputCard {
    #[serde(default = "default_layout")]
    pub layout: Layout,
    #[serde(default = "default_channels")]
    pub channels: usize,
    pub height: usize,
    pub width: usize,
    #[serde(default = "default_resize")]
    pub resize: Resize,
    /// Also read as `gray_to_rgb` (American spelling).
    #[serde(default = "default_grey", alias = "gray_to_rgb")]
    pub grey_to_rgb: GreyRule,
    #[serde(default = "default_scale")]
    pub scale: Scale,
    #[serde(default)]
    pub mean: Vec<f32>,
    #[serde(default)]
    pub std: Vec<f32>,
    /// How DICOM and 16-bit images become 0..1 (see `feed::window`); absent: the file's first
    /// window for DICOM (its lowest..highest value if it has none), all values for 16-bit PNG
    /// and TIFF. 8-bit images are always v / 255.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub window: Option<Windowing>,
    /// Fixed `mean`/`std`, or per-image standardisation. Left out of the written card when
    /// fixed, so cards and sweep cache keys from before it read the same.
    #[serde(default, skip_serializing_if = "Normalise::is_fixed")]
    pub normalise: Normalise,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct OutputCard {
    #[serde(default = "default_kind")]
    pub kind: OutputKind,
    #[serde(default)]
    pub labels: Vec<String>,
    /// The graph output that holds the class scores, by its ONNX name. Needed only when the
    /// model has several outputs and more than one (or none) is shaped [1, C] with C the
    /// number of labels; `spurion info` lists the outputs.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name: Option<String>,
}

impl Default for OutputCard {
    fn default() -> Self {
        OutputCard { kind: OutputKind::Logits, labels: Vec::new(), name: None }
    }
}

/// How an image is fed to one model. See the module docs for the file format.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FeedCard {
    pub input: InputCard,
    #[serde(default)]
    pub output: OutputCard,
    /// Where the card and each of its fields came from (not part of the file).
    #[serde(skip)]
    pub origin: CardOrigin,
}

fn default_layout() -> Layout {
    Layout::Nchw
}
fn default_channels() -> usize {
    1
}
fn default_resize() -> Resize {
    Resize::Stretch
}
fn default_grey() -> GreyRule {
    GreyRule::Replicate
}
fn default_scale() -> Scale {
    Scale::Unit
}
fn default_kind() -> OutputKind {
    OutputKind::Logits
}

impl FeedCard {
    /// Reads and checks a card.
    pub fn load(path: &Path) -> Result<FeedCard> {
        let text = std::fs::read_to_string(path)
            .with_context(|| format!("cannot read feed card {}", path.display()))?;
        let mut card: FeedCard = toml::from_str(&text).map_err(|e| {
            anyhow::anyhow!(
                "feed card {} is not valid: {}\nSee the example in DEVELOPERS.md (section \"Feed cards\").",
                path.display(),
                e.to_string().trim()
            )
        })?;
        card.check().with_context(|| format!("feed card {}", path.display()))?;
        card.origin = CardOrigin::of_file(path, &text);
        Ok(card)
    }

    /// The sidecar path for a model: `m.onnx` → `m.feed.toml`.
    pub fn sidecar_path(model_path: &Path) -> PathBuf {
        let stem = model_path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
        model_path.with_file_name(format!("{stem}.feed.toml"))
    }

    /// The card beside a model, if there is one.
    pub fn for_model(model_path: &Path) -> Result<Option<FeedCard>> {
        let p = Self::sidecar_path(model_path);
        if p.exists() { Self::load(&p).map(Some) } else { Ok(None) }
    }

    /// How to load the model at `model_path` as its sidecar card says: which output to score
    /// (`[output] name`, else the one with as many classes as the card has labels). Default
    /// options when there is no card.
    pub fn sidecar_load_options(model_path: &Path) -> Result<LoadOptions> {
        Ok(match Self::for_model(model_path)? {
            Some(c) => LoadOptions {
                output: c.output.name.clone(),
                classes: (!c.output.labels.is_empty()).then_some(c.output.labels.len()),
                ..Default::default()
            },
            None => LoadOptions::default(),
        })
    }

    /// The card beside the model, else one inferred from the graph; either way with what the
    /// graph does to its input itself (see [`CardOrigin::graph_normalises`]).
    pub fn for_loaded(model: &Model) -> Result<FeedCard> {
        let c = match Self::for_model(model.path())? {
            Some(c) => c,
            None => Self::infer(model)?,
        };
        c.for_model_graph(model)
    }

    /// A card read from a file, checked against `model`, with what the graph does to its input.
    pub fn for_model_graph(mut self, model: &Model) -> Result<FeedCard> {
        if self.origin.file.is_some() {
            self.check_against(model)?;
        }
        self.origin.graph_normalises = model.input_normalisation();
        Ok(self)
    }

    /// A card guessed from the model's input shape: layout from where the 1 or 3 channel axis
    /// sits, no normalisation, labels `class 0..n`.
    pub fn infer(model: &Model) -> Result<FeedCard> {
        let shape = model.input_shape();
        if shape.len() != 4 {
            bail!(
                "model {} takes a rank-{} input {:?}; image feeding needs rank 4 (N,C,H,W or N,H,W,C). \
                 Feed it a tensor with --tensor instead.",
                model.path().display(),
                shape.len(),
                shape
            );
        }
        let (layout, c, h, w) = if matches!(shape[1], 1 | 3) {
            (Layout::Nchw, shape[1], shape[2], shape[3])
        } else if matches!(shape[3], 1 | 3) {
            (Layout::Nhwc, shape[3], shape[1], shape[2])
        } else {
            bail!(
                "cannot tell the channel axis of model {} from its input shape {:?}. \
                 Write a feed card {} saying layout and channels.",
                model.path().display(),
                shape,
                Self::sidecar_path(model.path()).display()
            );
        };
        let kind = if model.ends_in_softmax() { OutputKind::Probabilities } else { OutputKind::Logits };
        Ok(FeedCard {
            input: InputCard {
                layout,
                channels: c,
                height: h,
                width: w,
                resize: Resize::Stretch,
                grey_to_rgb: GreyRule::Replicate,
                scale: Scale::Unit,
                mean: vec![0.0; c],
                std: vec![1.0; c],
                window: None,
                normalise: Normalise::Fixed,
            },
            output: OutputCard {
                kind,
                labels: (0..model.output_len()).map(|i| format!("class {i}")).collect(),
                name: None,
            },
            origin: CardOrigin { graph_normalises: model.input_normalisation(), ..CardOrigin::default() },
        })
    }

    /// The input tensor shape this card produces (batch 1).
    pub fn tensor_shape(&self) -> Vec<usize> {
        let i = &self.input;
        match i.layout {
            Layout::Nchw => vec![1, i.channels, i.height, i.width],
            Layout::Nhwc => vec![1, i.height, i.width, i.channels],
        }
    }

    /// Label of class `index`, or `class N` when the card has none.
    pub fn label(&self, index: usize) -> String {
        self.output.labels.get(index).cloned().unwrap_or_else(|| format!("class {index}"))
    }

    /// Per-channel mean and std, expanded from zero, one or `channels` values.
    pub fn mean_std(&self) -> (Vec<f32>, Vec<f32>) {
        let c = self.input.channels;
        let expand = |v: &[f32], dflt: f32| match v.len() {
            0 => vec![dflt; c],
            1 => vec![v[0]; c],
            _ => v.to_vec(),
        };
        (expand(&self.input.mean, 0.0), expand(&self.input.std, 1.0))
    }

    pub(crate) fn check(&self) -> Result<()> {
        let i = &self.input;
        if !matches!(i.channels, 1 | 3) {
            bail!("input.channels is {}; spurion feeds 1- or 3-channel images", i.channels);
        }
        if i.height == 0 || i.width == 0 {
            bail!("input.height and input.width must be positive");
        }
        for (name, v) in [("mean", &i.mean), ("std", &i.std)] {
            if !(v.is_empty() || v.len() == 1 || v.len() == i.channels) {
                bail!("input.{name} has {} values; give 1 or {} (one per channel)", v.len(), i.channels);
            }
            if v.iter().any(|x| !x.is_finite()) {
                bail!("input.{name} has a value that is not a finite number");
            }
        }
        if i.std.iter().any(|s| *s == 0.0) {
            bail!("input.std has a zero; division by zero would make every input infinite");
        }
        if i.normalise == Normalise::PerImage && !(i.mean.is_empty() && i.std.is_empty()) {
            bail!(
                "input.normalise is \"per-image\", which takes the picture's own mean and std, but the card \
                 also gives input.mean or input.std; remove them, or set normalise = \"fixed\""
            );
        }
        Ok(())
    }

    /// Checks that the card's tensor shape is what the model takes.
    pub fn check_against(&self, model: &Model) -> Result<()> {
        let want = model.input_shape();
        let got = self.tensor_shape();
        if want != got.as_slice() {
            bail!(
                "feed card {} makes input tensors of shape {:?} but model {} takes {:?}. \
                 Fix layout/channels/height/width in the card.",
                Self::sidecar_path(model.path()).display(),
                got,
                model.path().display(),
                want
            );
        }
        if let Some(name) = self.output.name.as_deref().filter(|n| *n != model.output_name()) {
            bail!(
                "feed card {} names output '{name}' but model {} was loaded scoring output '{}'; \
                 load it with --output {name} (or fix [output] name in the card)",
                Self::sidecar_path(model.path()).display(),
                model.path().display(),
                model.output_name()
            );
        }
        if !self.output.labels.is_empty() && self.output.labels.len() != model.output_len() {
            bail!(
                "feed card {} lists {} labels but model {} has {} outputs",
                Self::sidecar_path(model.path()).display(),
                self.output.labels.len(),
                model.path().display(),
                model.output_len()
            );
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn short_card_fills_defaults() {
        let c: FeedCard = toml::from_str("[input]\nheight = 8\nwidth = 6\n").unwrap();
        c.check().unwrap();
        assert_eq!(c.tensor_shape(), vec![1, 1, 8, 6]);
        assert_eq!(c.mean_std(), (vec![0.0], vec![1.0]));
        assert_eq!(c.label(1), "class 1");
    }

    #[test]
    fn bad_cards_are_refused_with_the_field_named() {
        let c: FeedCard = toml::from_str("[input]\nheight = 8\nwidth = 6\nchannels = 3\nmean = [1.0, 2.0]\n").unwrap();
        let e = c.check().unwrap_err().to_string();
        assert!(e.contains("input.mean"), "{e}");
        let c: FeedCard = toml::from_str("[input]\nheight = 8\nwidth = 6\nstd = [0.0]\n").unwrap();
        assert!(c.check().unwrap_err().to_string().contains("zero"));
        assert!(toml::from_str::<FeedCard>("[input]\nheight = 8\nwidth = 6\nlayuot = \"nchw\"\n").is_err());
    }
}
