//! Where a feed came from: the card file and which fields it writes, what the graph says, and
//! what was left to a default; the feed as one summary for `spurion info`, `run.json` and the
//! inspector, and the warning for a feed that is only guessed.

use std::path::{Path, PathBuf};

use serde::{Deserialize, Serialize};

use super::card::{FeedCard, GreyRule, Layout, Normalise, OutputKind, Resize, Scale};
use super::window::Windowing;

/// Where the card and each of its fields came from. Not part of the card file.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct CardOrigin {
    /// The card file read; `None`: no card, the feed was guessed from the graph.
    pub file: Option<PathBuf>,
    /// The fields the file writes, as `input.mean`, `output.labels`.
    pub written: Vec<String>,
    /// What the graph itself does to its input right after it, when that is a shift or scale by
    /// constants (a normalisation inside the model), in words; `None` when it does not.
    pub graph_normalises: Option<String>,
}

impl CardOrigin {
    /// The origin of a card read from `path` whose text is `text` (already parsed once).
    pub fn of_file(path: &Path, text: &str) -> CardOrigin {
        let mut written = vec![];
        if let Ok(table) = text.parse::<toml::Table>() {
            for section in ["input", "output"] {
                if let Some(t) = table.get(section).and_then(|v| v.as_table()) {
                    for k in t.keys() {
                        let k = if k == "gray_to_rgb" { "grey_to_rgb" } else { k.as_str() };
                        written.push(format!("{section}.{k}"));
                    }
                }
            }
        }
        CardOrigin { file: Some(path.to_path_buf()), written, graph_normalises: None }
    }
}

/// Where one value of the feed came from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Origin {
    /// Written in the feed card.
    Card,
    /// Read from the model's graph (its input shape, a final softmax).
    Graph,
    /// Neither: spurion's default.
    Default,
}

impl Origin {
    pub fn word(self) -> &'static str {
        match self {
            Origin::Card => "card",
            Origin::Graph => "graph",
            Origin::Default => "default",
        }
    }
}

impl FeedCard {
    /// Where `field` (`input.mean`, `output.kind`, …) came from.
    pub fn origin_of(&self, field: &str) -> Origin {
        if self.origin.written.iter().any(|w| w == field) {
            return Origin::Card;
        }
        let from_graph = ["input.layout", "input.channels", "input.height", "input.width", "output.kind"];
        if self.origin.file.is_none() && from_graph.contains(&field) { Origin::Graph } else { Origin::Default }
    }

    /// True when no card was read: the feed is spurion's guess from the graph.
    pub fn guessed(&self) -> bool {
        self.origin.file.is_none()
    }

    /// The warning for a feed that is only guessed while the graph does not normalise its input
    /// itself: what was assumed, and how to write a card. `None` with a card, or when the graph
    /// normalises. `model` is the model file the card would sit beside.
    pub fn guess_warning(&self, model: &Path) -> Option<String> {
        if !self.guessed() || self.origin.graph_normalises.is_some() {
            return None;
        }
        let i = &self.input;
        let name = model.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
        Some(format!(
            "no feed card beside {name} ({}) and the graph does not normalise its input itself, so the feed is \
             guessed: the picture is stretched to {}×{}, laid out {} with {} channel(s), scaled to 0..1 with no \
             mean or std. A model trained on normalised input would be read on a picture it never sees. Write \
             a card in one step: spurion card --model {} --preset imagenet (or unit, signed-unit, per-image, \
             or --mean … --std …)",
            FeedCard::sidecar_path(model).file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default(),
            i.width,
            i.height,
            layout_word(i.layout),
            i.channels,
            model.display()
        ))
    }

    /// The feed as a summary with each value's origin.
    pub fn summary(&self, model: &Path) -> FeedSummary {
        let i = &self.input;
        let (mean, std) = match i.normalise {
            Normalise::Fixed => self.mean_std(),
            Normalise::PerImage => (vec![], vec![]),
        };
        let norm_from = [self.origin_of("input.mean"), self.origin_of("input.std"), self.origin_of("input.normalise")]
            .into_iter()
            .find(|o| *o == Origin::Card)
            .unwrap_or(Origin::Default);
        FeedSummary {
            card: self.origin.file.as_ref().map(|p| p.display().to_string()),
            guessed: self.guessed(),
            graph_normalises: self.origin.graph_normalises.clone(),
            size: Size { height: i.height, width: i.width, from: self.origin_of("input.height") },
            resize: Sourced { value: i.resize, from: self.origin_of("input.resize") },
            layout: Sourced { value: i.layout, from: self.origin_of("input.layout") },
            channels: Sourced { value: i.channels, from: self.origin_of("input.channels") },
            grey_to_rgb: Sourced { value: i.grey_to_rgb, from: self.origin_of("input.grey_to_rgb") },
            scale: Sourced { value: i.scale, from: self.origin_of("input.scale") },
            normalise: Norm { rule: i.normalise, mean, std, from: norm_from },
            window: Sourced { value: i.window.clone(), from: self.origin_of("input.window") },
            output: Sourced { value: self.output.kind, from: self.origin_of("output.kind") },
            labels_from: self.origin_of("output.labels"),
            warning: self.guess_warning(model),
        }
    }
}

fn layout_word(l: Layout) -> &'static str {
    match l {
        Layout::Nchw => "NCHW",
        Layout::Nhwc => "NHWC",
    }
}

/// A value and where it came from.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Sourced<T> {
    pub value: T,
    pub from: Origin,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Size {
    pub height: usize,
    pub width: usize,
    pub from: Origin,
}

/// The normalisation: fixed per-channel mean and std (expanded to one per channel), or
/// per-image standardisation (then the numbers are the picture's, in the reading's record).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Norm {
    pub rule: Normalise,
    pub mean: Vec<f32>,
    pub std: Vec<f32>,
    pub from: Origin,
}

/// The feed a model is given, card-level (no picture yet), each value with its origin.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FeedSummary {
    /// The card file read, `null` when there is none.
    pub card: Option<String>,
    /// No card: the feed was guessed from the graph and defaults.
    pub guessed: bool,
    /// What the graph does to its input itself, when it shifts or scales it by constants.
    pub graph_normalises: Option<String>,
    pub size: Size,
    pub resize: Sourced<Resize>,
    pub layout: Sourced<Layout>,
    pub channels: Sourced<usize>,
    pub grey_to_rgb: Sourced<GreyRule>,
    pub scale: Sourced<Scale>,
    pub normalise: Norm,
    /// DICOM and 16-bit images: the card's window (`null`: the file's own first window for
    /// DICOM, every value for 16-bit PNG and TIFF).
    pub window: Sourced<Option<Windowing>>,
    pub output: Sourced<OutputKind>,
    pub labels_from: Origin,
    /// Said when the feed is guessed and the graph does not normalise.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub warning: Option<String>,
}

impl FeedSummary {
    /// The summary as lines for people (`spurion info`, the inspector).
    pub fn lines(&self) -> Vec<String> {
        let mut out = vec![match &self.card {
            Some(c) => format!("card          {c}"),
            None => "card          none: guessed from the graph and defaults".to_string(),
        }];
        out.push(format!("size          {}×{} (width×height, {})", self.size.width, self.size.height, self.size.from.word()));
        out.push(format!("resize        {} ({})", name(&self.resize.value), self.resize.from.word()));
        out.push(format!(
            "layout        {}, {} channel(s) ({}, {})",
            layout_word(self.layout.value),
            self.channels.value,
            self.layout.from.word(),
            self.channels.from.word()
        ));
        out.push(format!("grey to RGB   {} ({})", name(&self.grey_to_rgb.value), self.grey_to_rgb.from.word()));
        out.push(format!("scaling       {} ({})", name(&self.scale.value), self.scale.from.word()));
        out.push(match self.normalise.rule {
            Normalise::Fixed => format!(
                "mean / std    {:?} / {:?} ({})",
                self.normalise.mean,
                self.normalise.std,
                self.normalise.from.word()
            ),
            Normalise::PerImage => format!("mean / std    per-image standardisation ({})", self.normalise.from.word()),
        });
        out.push(format!(
            "window        {} ({})",
            self.window.value.as_ref().map_or("the file's own (DICOM), every value (16-bit)".to_string(), |w| {
                serde_json::to_string(w).unwrap_or_default()
            }),
            self.window.from.word()
        ));
        out.push(format!("output        {} ({}), labels ({})", name(&self.output.value), self.output.from.word(), self.labels_from.word()));
        out.push(format!(
            "graph         {}",
            self.graph_normalises.as_deref().unwrap_or("does not shift or scale its input by constants itself")
        ));
        out
    }
}

/// The kebab-case name the card file uses for a value (`stretch`, `per-image`).
fn name<T: Serialize>(v: &T) -> String {
    serde_json::to_value(v).ok().and_then(|v| v.as_str().map(str::to_string)).unwrap_or_default()
}
