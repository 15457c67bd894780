//! `spurion feed`: an image exactly as it is decoded and windowed for a model, before resizing
//! and normalisation, so that users and tests can see what the model gets; with `--model`, the
//! very tensor the model is given (the form `explain --tensor` takes); with `--from-reading`, the
//! model-input tensor a reading was made of, from its reading.json alone.

use std::path::PathBuf;

use anyhow::{Context, Result};
use clap::Args;

use crate::feed::{FeedCard, OpenOptions, Picture, write_tensor};
use crate::report::SourceFacts;

#[derive(Args, Debug)]
pub struct FeedArgs {
    /// The image (PNG 8/16-bit, JPEG, TIFF, BMP, DICOM).
    #[arg(long, short = 'i')]
    pub image: PathBuf,
    /// The feed card whose window to use (default: the file's own window for DICOM, all values
    /// for 16-bit images).
    #[arg(long, conflicts_with = "from_reading")]
    pub feed: Option<PathBuf>,
    /// A reading.json (or review.json): write the model-input tensor that reading was made of,
    /// resized, normalised and laid out by the feed it records (batch 1, float32), instead of
    /// the decoded picture.
    #[arg(long, value_name = "READING_JSON")]
    pub from_reading: Option<PathBuf>,
    /// The frame of a multi-frame DICOM file, from 0.
    #[arg(long, default_value_t = 0)]
    pub frame: usize,
    /// The .npy to write: float32, H×W×C, values 0..1; with --model or --from-reading, the model's input tensor.
    #[arg(long)]
    pub out: PathBuf,
    /// Write the tensor this model is given instead: resized, scaled, normalised and laid out
    /// by its feed card (--feed, or its sidecar MODEL.feed.toml), as `explain --tensor` takes it.
    #[arg(long, short = 'm', conflicts_with = "from_reading")]
    pub model: Option<PathBuf>,
}

pub fn run(a: &FeedArgs) -> Result<()> {
    if let Some(r) = &a.from_reading {
        let text = std::fs::read_to_string(r).with_context(|| format!("cannot read {}", r.display()))?;
        let t = crate::report::tensor_from_reading(&text, r, &a.image)?;
        write_tensor(&a.out, &t).with_context(|| format!("writing {}", a.out.display()))?;
        println!("{}: the model-input tensor {:?} of the reading in {} → {}", a.image.display(), t.shape(), r.display(), a.out.display());
        return Ok(());
    }
    if let Some(m) = &a.model {
        let margs = super::ModelArgs { model: m.clone(), how: super::ModelHow { feed: a.feed.clone(), ..Default::default() } };
        let model = margs.load()?;
        let card = margs.card(&model)?;
        let pic = Picture::open_with(&a.image, &OpenOptions { frame: a.frame, window: card.input.window.clone() })?;
        let x = crate::methods::Input::picture(pic, &card).with_context(|| format!("image {}", a.image.display()))?.model_tensor()?;
        write_tensor(&a.out, &x).with_context(|| format!("writing {}", a.out.display()))?;
        println!("{}: the input tensor of {}, shape {:?} → {}", a.image.display(), m.display(), x.shape(), a.out.display());
        return Ok(());
    }
    let window = match &a.feed {
        Some(p) => FeedCard::load(p)?.input.window,
        None => None,
    };
    let pic = Picture::open_with(&a.image, &OpenOptions { frame: a.frame, window })?;
    write_tensor(&a.out, &pic.pixels.clone().into_dyn()).with_context(|| format!("writing {}", a.out.display()))?;
    let (h, w, c) = pic.pixels.dim();
    println!("{}: {w}×{h}, {c} channel(s), {} bits → {}", pic.name(), pic.bit_depth, a.out.display());
    // What the file says about itself, without any patient-identifying attribute.
    if let Some(facts) = SourceFacts::of(&pic) {
        println!("{}", serde_json::to_string_pretty(&facts)?);
    }
    Ok(())
}
