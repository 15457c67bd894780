//! What is explained: a picture fed through a feed card, or a tensor fed as is.

use anyhow::{Context, Result};
use ndarray::ArrayD;

use super::guess_spatial_axes;
use crate::feed::{FeedCard, Feeder, Layout, Picture};

#[derive(Clone, Debug)]
pub enum Input {
    Picture { picture: Picture, feeder: Feeder },
    Tensor { tensor: ArrayD<f32>, name: String },
}

impl Input {
    /// A picture, planned through `card` (checked against the model by the caller).
    pub fn picture(picture: Picture, card: &FeedCard) -> Result<Input> {
        let feeder = Feeder::for_picture(card, &picture).with_context(|| format!("feeding {}", picture.name()))?;
        Ok(Input::Picture { picture, feeder })
    }

    pub fn tensor(tensor: ArrayD<f32>, name: impl Into<String>) -> Input {
        Input::Tensor { tensor, name: name.into() }
    }

    pub fn name(&self) -> String {
        match self {
            Input::Picture { picture, .. } => picture.name(),
            Input::Tensor { name, .. } => name.clone(),
        }
    }

    /// The model-input tensor.
    pub fn model_tensor(&self) -> Result<ArrayD<f32>> {
        match self {
            Input::Picture { picture, feeder } => feeder.tensor(&picture.pixels),
            Input::Tensor { tensor, .. } => Ok(tensor.clone()),
        }
    }

    /// The spatial axes of the model-input tensor.
    pub fn spatial_axes(&self) -> Result<[usize; 2]> {
        match self {
            Input::Picture { feeder, .. } => Ok(match feeder.card().input.layout {
                Layout::Nchw => [2, 3],
                Layout::Nhwc => [1, 2],
            }),
            Input::Tensor { tensor, .. } => guess_spatial_axes(tensor.shape()),
        }
    }
}
