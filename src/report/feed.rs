//! The `feed` object of `reading.json` and `review.json`: how the picture became the tensor the
//! model read, each value with where it came from, and the card's input section as used, so the
//! tensor can be made again from the file alone (`spurion feed --from-reading`).

use std::path::Path;

use anyhow::{Context, Result, bail};
use serde::Serialize;

use crate::feed::window::ResolvedWindow;
use crate::feed::{ChannelRule, FeedCard, FeedSummary, Feeder, InputCard, OpenOptions, Picture, Standardise};
use crate::methods::Input;

/// How one input was fed.
#[derive(Clone, Debug, Serialize)]
#[serde(tag = "fed", rename_all = "kebab-case")]
pub enum FeedRecord {
    /// A picture through a feed card.
    Picture(Box<PictureFeed>),
    /// A tensor file, fed exactly as given.
    Tensor { file: String, note: &'static str },
}

/// A picture's feed: the card-level summary, then what this picture made of it.
#[derive(Clone, Debug, Serialize)]
pub struct PictureFeed {
    #[serde(flatten)]
    pub summary: FeedSummary,
    /// The picture as decoded, before resizing.
    pub picture: PictureSize,
    /// The frame of a multi-frame DICOM file (0 for other images).
    pub frame: usize,
    /// How the picture's channels became the model's: same, replicate (grey to three) or luma.
    pub channel_rule: ChannelRule,
    /// Per-image standardisation's numbers for this picture, on 0..1 pixels.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub standardise: Option<Standardise>,
    /// The window that turned stored values into 0..1 (DICOM, 16-bit images).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub window_used: Option<ResolvedWindow>,
    pub tensor_shape: Vec<usize>,
    /// The card's input section exactly as used: with the picture and `frame` it makes the
    /// same tensor again, bit for bit (`spurion feed --from-reading`).
    pub input: InputCard,
}

/// A picture's size as decoded: rows, columns, channels, bits per sample in the file.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct PictureSize {
    pub height: usize,
    pub width: usize,
    pub channels: usize,
    pub bit_depth: u8,
}

const TENSOR_NOTE: &str = "a tensor file is fed exactly as given: no feed card, resizing or normalisation applies";

impl FeedRecord {
    /// The record of `input` as read by the model in `model_file`.
    pub fn of_input(input: &Input, model_file: &Path) -> FeedRecord {
        match input {
            Input::Picture { picture, feeder } => Self::of_picture(picture, feeder, model_file),
            Input::Tensor { name, .. } => FeedRecord::Tensor { file: name.clone(), note: TENSOR_NOTE },
        }
    }

    pub fn of_picture(picture: &Picture, feeder: &Feeder, model_file: &Path) -> FeedRecord {
        let card = feeder.card();
        FeedRecord::Picture(Box::new(PictureFeed {
            summary: card.summary(model_file),
            picture: PictureSize { height: picture.height(), width: picture.width(), channels: picture.channels(), bit_depth: picture.bit_depth },
            frame: picture.dicom.as_ref().map_or(0, |d| d.frame),
            channel_rule: feeder.channel_rule(),
            standardise: feeder.standardise(),
            window_used: picture.window.clone(),
            tensor_shape: card.tensor_shape(),
            input: card.input.clone(),
        }))
    }
}

impl PictureFeed {
    /// What this picture made of the feed, as lines for people (the inspector's Feed window).
    pub fn picture_lines(&self) -> Vec<String> {
        let p = &self.picture;
        let mut out = vec![
            format!("picture       {}×{}, {} channel(s), {} bits (frame {})", p.width, p.height, p.channels, p.bit_depth, self.frame),
            format!("channels      {}", serde_json::to_value(self.channel_rule).ok().and_then(|v| v.as_str().map(str::to_string)).unwrap_or_default()),
        ];
        if let Some(s) = self.standardise {
            out.push(format!("per-image     mean {:.4}, std {:.4} (on 0..1 pixels)", s.mean, s.std));
        }
        if let Some(w) = &self.window_used {
            out.push(format!("window used   {}", serde_json::to_string(&w.transform).unwrap_or_default()));
        }
        out
    }
}

/// The model-input tensor of `image` made again from the `feed` object of a `reading.json` or
/// `review.json` (its text `json`, read from `from`): the same card input section, frame and
/// code path as the reading, so the same tensor. Refuses a reading of a tensor file and an
/// image whose size differs from the one read.
pub fn tensor_from_reading(json: &str, from: &Path, image: &Path) -> Result<ndarray::ArrayD<f32>> {
    let v: serde_json::Value = serde_json::from_str(json).with_context(|| format!("{} is not JSON", from.display()))?;
    let Some(feed) = v.get("feed") else {
        bail!("{} has no \"feed\" object; it was written by a spurion that did not record the feed. Run the reading again", from.display());
    };
    if feed.get("fed").and_then(|f| f.as_str()) == Some("tensor") {
        bail!("{} is a reading of a tensor file, which was fed as given; that file is the tensor", from.display());
    }
    let input: InputCard = serde_json::from_value(feed.get("input").cloned().unwrap_or_default())
        .with_context(|| format!("the feed.input of {} is not a feed card's input section", from.display()))?;
    let frame = feed.get("frame").and_then(|f| f.as_u64()).unwrap_or(0) as usize;
    let card = FeedCard { input, output: Default::default(), origin: Default::default() };
    card.check().with_context(|| format!("the feed.input of {}", from.display()))?;
    let picture = Picture::open_with(image, &OpenOptions { frame, window: card.input.window.clone() })?;
    let size = |k: &str| feed.get("picture").and_then(|p| p.get(k)).and_then(|v| v.as_u64());
    if let (Some(h), Some(w), Some(c)) = (size("height"), size("width"), size("channels")) {
        let got = (picture.height() as u64, picture.width() as u64, picture.channels() as u64);
        if got != (h, w, c) {
            bail!(
                "{} is {}×{} with {} channel(s) but the reading in {} read a picture of {w}×{h} with {c}; give the image that was read",
                image.display(),
                got.1,
                got.0,
                got.2,
                from.display()
            );
        }
    }
    let feeder = Feeder::for_picture(&card, &picture)?;
    feeder.tensor(&picture.pixels)
}
