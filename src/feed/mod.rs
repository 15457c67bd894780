//! Feeding a model: the feed card, pictures, tensors, and the way back from tensor to picture.

mod card;
pub mod dicom;
pub mod enlarge;
mod make;
mod origin;
mod picture;
mod prepare;
pub mod window;

pub use card::{FeedCard, GreyRule, InputCard, Layout, Normalise, OutputCard, OutputKind, Resize, Scale};
pub use make::{CardSpec, Preset, card_for, card_text, read_labels, write_card};
pub use origin::{CardOrigin, FeedSummary, Origin};
pub use prepare::{ChannelRule, Feeder, Standardise, axis_weights, grid_to_tensor, tensor_to_grid};
pub use picture::{IMAGE_ENDINGS, LUMA, OpenOptions, Picture, default_dicom_window, is_image_file, list_images, luminance};

use std::path::Path;

use anyhow::{Context, Result, bail};
use ndarray::ArrayD;

/// Reads a float32 (or float64, converted) `.npy` tensor. A tensor holding NaN or infinite
/// values is refused: no attribution of it means anything.
pub fn read_tensor(path: &Path) -> Result<ArrayD<f32>> {
    use ndarray_npy::ReadNpyExt;
    let bytes = std::fs::read(path).with_context(|| format!("cannot read tensor file {}", path.display()))?;
    let a = match ArrayD::<f32>::read_npy(std::io::Cursor::new(&bytes)) {
        Ok(a) => a,
        Err(_) => match ArrayD::<f64>::read_npy(std::io::Cursor::new(&bytes)) {
            Ok(a) => a.mapv(|v| v as f32),
            Err(e) => bail!(
                "{} is not a NumPy .npy file of float32 or float64 values ({e}). \
                 Save it with numpy.save(path, array.astype(numpy.float32)).",
                path.display()
            ),
        },
    };
    if let Some((at, v)) = a.indexed_iter().find(|(_, v)| !v.is_finite()) {
        bail!(
            "tensor {} holds {v} at index {:?}; spurion needs finite values everywhere. Fix the values \
             (numpy.isfinite(a).all() should be True) and save it again",
            path.display(),
            ndarray::Dimension::slice(&at)
        );
    }
    Ok(a)
}

/// Writes a float32 `.npy` file.
pub fn write_tensor(path: &Path, a: &ArrayD<f32>) -> Result<()> {
    use ndarray_npy::WriteNpyExt;
    let f = std::fs::File::create(path).with_context(|| format!("cannot create {}", path.display()))?;
    a.as_standard_layout()
        .write_npy(std::io::BufWriter::new(f))
        .with_context(|| format!("cannot write {}", path.display()))
}
