//! Baselines: the "absence of signal" an attribution is measured against.
//!
//! For pictures, baselines are built on the model's grid in image space (values 0..1, before
//! scaling and normalisation; see [`crate::feed::Feeder`]); blur sigmas are in model-grid pixels.
//! For raw tensors (`--tensor`), they act on the tensor as given: `black` is all zeros, blur and
//! noise act on the spatial axes. The choices follow the baselines compared by Sturmfels,
//! Lundberg and Lee (2020, Distill): black, constant, blurred, uniform noise, Gaussian noise
//! around the input, and a data-set mean.

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use ndarray::{Array3, ArrayD, Axis};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use serde::{Deserialize, Serialize};

use super::catalog::{BaselineKind, baseline_forms, tensor_baseline_forms};
use crate::feed::{Feeder, Picture, list_images};

/// A baseline choice. Parsed from the CLI forms in [`Baseline::parse`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "kebab-case")]
pub enum Baseline {
    /// All zeros in image space (black); zeros for a tensor.
    Black,
    /// Mid grey (0.5) in image space; the tensor's mid-range for a tensor.
    Grey,
    /// A constant in image space (0..1), or in tensor units for a tensor.
    Value { value: f32 },
    /// The input blurred with a Gaussian of `sigma` model-grid pixels.
    Blur { sigma: f32 },
    /// Uniform noise over the pixel range (image) or the tensor's range, seeded.
    UniformNoise { seed: u64 },
    /// The input plus Gaussian noise of `sigma` (image units, clipped to 0..1), seeded.
    GaussianNoise { sigma: f32, seed: u64 },
    /// The mean image of a folder, each image fed like the input.
    Mean { dir: PathBuf },
    /// A custom image, fed like the input.
    Image { path: PathBuf },
    /// A tensor of the model's input shape, used as is.
    Tensor { path: PathBuf },
    /// Baselines drawn from the images of a folder (expected gradients only).
    Folder { dir: PathBuf },
}

impl Baseline {
    /// Parses the text forms of [`super::catalog::BASELINES`]: `black`, `grey`, `value:0.2`,
    /// `blur:8`, `uniform-noise:7`, `gaussian-noise:0.1:7`, `mean:DIR`, `image:PATH`,
    /// `tensor:PATH`, `folder:DIR`.
    pub fn parse(s: &str) -> Result<Baseline> {
        let (head, rest) = match s.split_once(':') {
            Some((h, r)) => (h, Some(r)),
            None => (s, None),
        };
        let num = |v: &str, what: &str| -> Result<f32> {
            v.parse::<f32>().ok().filter(|x| x.is_finite()).with_context(|| {
                format!("baseline \"{s}\": {what} \"{v}\" is not a number")
            })
        };
        let seed = |v: &str| -> Result<u64> {
            v.parse::<u64>().with_context(|| format!("baseline \"{s}\": seed \"{v}\" is not a whole number"))
        };
        let need = |what: &str| -> Result<&str> {
            rest.filter(|r| !r.is_empty()).with_context(|| format!("baseline \"{s}\" needs {what}: {head}:{what}"))
        };
        let Some(kind) = BaselineKind::from_head(head) else {
            bail!("unknown baseline \"{s}\"; use one of: {}", baseline_forms());
        };
        Ok(match kind {
            BaselineKind::Black => Baseline::Black,
            BaselineKind::Grey => Baseline::Grey,
            BaselineKind::Value => Baseline::Value { value: num(need("V")?, "value")? },
            BaselineKind::Blur => {
                let sigma = num(need("SIGMA")?, "sigma")?;
                if sigma <= 0.0 {
                    bail!("baseline \"{s}\": blur sigma must be positive");
                }
                Baseline::Blur { sigma }
            }
            BaselineKind::UniformNoise => Baseline::UniformNoise { seed: rest.map(seed).transpose()?.unwrap_or(0) },
            BaselineKind::GaussianNoise => {
                let r = need("SIGMA:SEED")?;
                let (sg, sd) = r.split_once(':').unwrap_or((r, "0"));
                let sigma = num(sg, "sigma")?;
                if sigma <= 0.0 {
                    bail!("baseline \"{s}\": noise sigma must be positive");
                }
                Baseline::GaussianNoise { sigma, seed: seed(sd)? }
            }
            BaselineKind::Mean => Baseline::Mean { dir: need("DIR")?.into() },
            BaselineKind::Image => Baseline::Image { path: need("PATH")?.into() },
            BaselineKind::Tensor => Baseline::Tensor { path: need("PATH")?.into() },
            BaselineKind::Folder => Baseline::Folder { dir: need("DIR")?.into() },
        })
    }

    pub fn kind(&self) -> BaselineKind {
        match self {
            Baseline::Black => BaselineKind::Black,
            Baseline::Grey => BaselineKind::Grey,
            Baseline::Value { .. } => BaselineKind::Value,
            Baseline::Blur { .. } => BaselineKind::Blur,
            Baseline::UniformNoise { .. } => BaselineKind::UniformNoise,
            Baseline::GaussianNoise { .. } => BaselineKind::GaussianNoise,
            Baseline::Mean { .. } => BaselineKind::Mean,
            Baseline::Image { .. } => BaselineKind::Image,
            Baseline::Tensor { .. } => BaselineKind::Tensor,
            Baseline::Folder { .. } => BaselineKind::Folder,
        }
    }

    /// The canonical text form (what `parse` reads back).
    pub fn label(&self) -> String {
        let head = self.kind().entry().head;
        match self {
            Baseline::Black | Baseline::Grey => head.into(),
            Baseline::Value { value } => format!("{head}:{value}"),
            Baseline::Blur { sigma } => format!("{head}:{sigma}"),
            Baseline::UniformNoise { seed } => format!("{head}:{seed}"),
            Baseline::GaussianNoise { sigma, seed } => format!("{head}:{sigma}:{seed}"),
            Baseline::Mean { dir: p } | Baseline::Image { path: p } | Baseline::Tensor { path: p } | Baseline::Folder { dir: p } => {
                format!("{head}:{}", p.display())
            }
        }
    }

    /// A short title for people (strip tiles, file names): `blur σ 8`, `uniform noise #7`.
    pub fn title(&self) -> String {
        let name = |p: &Path| p.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_else(|| p.display().to_string());
        match self {
            Baseline::Black => "black".into(),
            Baseline::Grey => "grey".into(),
            Baseline::Value { value } => format!("value {value}"),
            Baseline::Blur { sigma } => format!("blur σ {sigma}"),
            Baseline::UniformNoise { seed } => format!("uniform noise #{seed}"),
            Baseline::GaussianNoise { sigma, seed } => format!("Gaussian σ {sigma} #{seed}"),
            Baseline::Mean { .. } => "dataset mean".into(),
            Baseline::Image { path } => format!("custom: {}", name(path)),
            Baseline::Tensor { path } => format!("tensor: {}", name(path)),
            Baseline::Folder { dir } => format!("draws from {}", name(dir)),
        }
    }

    /// Whether each draw differs (noise families and folders), so expected gradients resample it.
    pub fn is_distribution(&self) -> bool {
        self.kind().entry().distribution
    }
}

/// Gaussian blur of each channel of an H×W×C array; reflected edges; radius ⌈3σ⌉.
pub fn blur_grid(grid: &Array3<f32>, sigma: f32) -> Array3<f32> {
    let k = gaussian_kernel(sigma);
    let mut out = grid.clone();
    for mut plane in out.axis_iter_mut(Axis(2)) {
        let p = plane.to_owned();
        let p = convolve_axis(&p.into_dyn(), 0, &k);
        let p = convolve_axis(&p, 1, &k);
        plane.assign(&p.into_dimensionality::<ndarray::Ix2>().unwrap());
    }
    out
}

pub(crate) fn gaussian_kernel(sigma: f32) -> Vec<f32> {
    let r = (3.0 * sigma).ceil().max(1.0) as i64;
    let mut k: Vec<f32> = (-r..=r).map(|i| (-(i * i) as f32 / (2.0 * sigma * sigma)).exp()).collect();
    let s: f32 = k.iter().sum();
    k.iter_mut().for_each(|v| *v /= s);
    k
}

/// 1-D convolution of `a` along `axis` with a centred odd kernel, reflecting at the edges.
pub(crate) fn convolve_axis(a: &ArrayD<f32>, axis: usize, k: &[f32]) -> ArrayD<f32> {
    let n = a.shape()[axis] as i64;
    let r = (k.len() / 2) as i64;
    let reflect = |mut i: i64| -> usize {
        if n == 1 {
            return 0;
        }
        loop {
            if i < 0 {
                i = -i - 1;
            } else if i >= n {
                i = 2 * n - i - 1;
            } else {
                return i as usize;
            }
        }
    };
    let mut out = ArrayD::<f32>::zeros(a.raw_dim());
    for (j, kv) in k.iter().enumerate() {
        let off = j as i64 - r;
        for i in 0..n {
            let src = reflect(i + off);
            let mut dst = out.index_axis_mut(Axis(axis), i as usize);
            dst.scaled_add(*kv, &a.index_axis(Axis(axis), src));
        }
    }
    out
}

/// What a baseline is built against: a picture on its feeder, or a raw tensor.
pub(crate) enum Space<'a> {
    Grid { feeder: &'a Feeder, grid: &'a Array3<f32> },
    Tensor { tensor: &'a ArrayD<f32>, spatial: [usize; 2] },
}

/// Builds draw `draw` of a baseline as a model-input tensor.
pub(crate) fn build(b: &Baseline, space: &Space<'_>, draw: u64, folder_cache: &FolderCache) -> Result<ArrayD<f32>> {
    match space {
        Space::Grid { feeder, grid } => {
            let g = match b {
                Baseline::Black => Array3::zeros(grid.raw_dim()),
                Baseline::Grey => Array3::from_elem(grid.raw_dim(), 0.5),
                Baseline::Value { value } => Array3::from_elem(grid.raw_dim(), *value),
                Baseline::Blur { sigma } => blur_grid(grid, *sigma),
                Baseline::UniformNoise { seed } => {
                    let mut rng = ChaCha8Rng::seed_from_u64(seed.wrapping_add(draw));
                    Array3::from_shape_simple_fn(grid.raw_dim(), || rng.random::<f32>())
                }
                Baseline::GaussianNoise { sigma, seed } => {
                    let mut rng = ChaCha8Rng::seed_from_u64(seed.wrapping_add(draw));
                    grid.mapv(|v| {
                        let z: f32 = StandardNormal.sample(&mut rng);
                        (v + sigma * z).clamp(0.0, 1.0)
                    })
                }
                Baseline::Mean { dir } => folder_cache.mean(dir, feeder)?,
                Baseline::Image { path } => {
                    let pic = Picture::open(path).context("baseline image")?;
                    let f = Feeder::new(feeder.card(), pic.height(), pic.width(), pic.channels())
                        .with_context(|| format!("baseline image {}", path.display()))?;
                    f.prepare(&pic.pixels)?
                }
                Baseline::Tensor { path } => {
                    let t = crate::feed::read_tensor(path)?;
                    let want = feeder.card().tensor_shape();
                    if t.shape() != want.as_slice() {
                        bail!(
                            "baseline tensor {} has shape {:?}; the model input is {:?}",
                            path.display(),
                            t.shape(),
                            want
                        );
                    }
                    return Ok(t);
                }
                Baseline::Folder { dir } => folder_cache.draw(dir, feeder, draw)?,
            };
            Ok(feeder.normalise(&g))
        }
        Space::Tensor { tensor, spatial } => {
            let (lo, hi) = tensor.iter().fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), v| (a.min(*v), b.max(*v)));
            Ok(match b {
                Baseline::Black => ArrayD::zeros(tensor.raw_dim()),
                Baseline::Grey => ArrayD::from_elem(tensor.raw_dim(), 0.5 * (lo + hi)),
                Baseline::Value { value } => ArrayD::from_elem(tensor.raw_dim(), *value),
                Baseline::Blur { sigma } => {
                    let k = gaussian_kernel(*sigma);
                    let t = convolve_axis(tensor, spatial[0], &k);
                    convolve_axis(&t, spatial[1], &k)
                }
                Baseline::UniformNoise { seed } => {
                    let mut rng = ChaCha8Rng::seed_from_u64(seed.wrapping_add(draw));
                    ArrayD::from_shape_simple_fn(tensor.raw_dim(), || lo + (hi - lo) * rng.random::<f32>())
                }
                Baseline::GaussianNoise { sigma, seed } => {
                    let mut rng = ChaCha8Rng::seed_from_u64(seed.wrapping_add(draw));
                    tensor.mapv(|v| {
                        let z: f32 = StandardNormal.sample(&mut rng);
                        v + sigma * z
                    })
                }
                Baseline::Tensor { path } => {
                    let t = crate::feed::read_tensor(path)?;
                    if t.shape() != tensor.shape() {
                        bail!(
                            "baseline tensor {} has shape {:?}; the input tensor is {:?}",
                            path.display(),
                            t.shape(),
                            tensor.shape()
                        );
                    }
                    t
                }
                Baseline::Mean { .. } | Baseline::Image { .. } | Baseline::Folder { .. } => bail!(
                    "baseline \"{}\" needs images fed through a feed card; with --tensor use {}",
                    b.label(),
                    tensor_baseline_forms()
                ),
            })
        }
    }
}

/// Folder images prepared once per explain call (mean images and expected-gradient draws).
#[derive(Default)]
pub(crate) struct FolderCache {
    grids: std::sync::Mutex<Vec<(PathBuf, std::sync::Arc<Vec<Array3<f32>>>)>>,
}

impl FolderCache {
    fn grids(&self, dir: &Path, feeder: &Feeder) -> Result<std::sync::Arc<Vec<Array3<f32>>>> {
        let mut g = self.grids.lock().unwrap();
        if let Some((_, v)) = g.iter().find(|(d, _)| d == dir) {
            return Ok(v.clone());
        }
        let files = list_images(dir)?;
        if files.is_empty() {
            bail!("baseline folder {} has no images (PNG, JPEG, TIFF or BMP)", dir.display());
        }
        let mut out = Vec::with_capacity(files.len());
        for f in &files {
            let pic = Picture::open(f).context("baseline folder")?;
            let fd = Feeder::new(feeder.card(), pic.height(), pic.width(), pic.channels())
                .with_context(|| format!("baseline image {}", f.display()))?;
            out.push(fd.prepare(&pic.pixels)?);
        }
        let v = std::sync::Arc::new(out);
        g.push((dir.to_path_buf(), v.clone()));
        Ok(v)
    }

    fn mean(&self, dir: &Path, feeder: &Feeder) -> Result<Array3<f32>> {
        let g = self.grids(dir, feeder)?;
        let mut acc = Array3::<f32>::zeros(g[0].raw_dim());
        for x in g.iter() {
            acc += x;
        }
        Ok(acc / g.len() as f32)
    }

    fn draw(&self, dir: &Path, feeder: &Feeder, draw: u64) -> Result<Array3<f32>> {
        let g = self.grids(dir, feeder)?;
        // A fixed scramble of the draw index, so draws visit the folder in a seeded order.
        let i = (draw.wrapping_mul(0x9E37_79B9_7F4A_7C15) >> 17) as usize % g.len();
        Ok(g[i].clone())
    }
}

/// Spatial axes of a rank-4 tensor: NCHW when axis 1 looks like channels, else NHWC.
pub fn guess_spatial_axes(shape: &[usize]) -> Result<[usize; 2]> {
    match shape.len() {
        4 if shape[1] <= 4 && shape[3] > 4 => Ok([2, 3]),
        4 if shape[3] <= 4 => Ok([1, 2]),
        4 => Ok([2, 3]),
        3 => Ok([1, 2]),
        2 => Ok([0, 1]),
        n => bail!("cannot tell the spatial axes of a rank-{n} tensor {shape:?}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parse_round_trips_and_explains_mistakes() {
        for s in ["black", "grey", "value:0.25", "blur:8", "uniform-noise:7", "gaussian-noise:0.1:3", "mean:/d", "image:/a.png", "tensor:/t.npy", "folder:/f"] {
            let b = Baseline::parse(s).unwrap();
            assert_eq!(Baseline::parse(&b.label()).unwrap(), b, "{s}");
        }
        assert!(Baseline::parse("blur").unwrap_err().to_string().contains("blur:SIGMA"));
        assert!(Baseline::parse("blur:-1").is_err());
        assert!(Baseline::parse("purple").unwrap_err().to_string().contains("black | grey"));
    }

    #[test]
    fn blur_keeps_constants_and_mass() {
        // A constant image is a fixed point of a normalised blur; a single bright pixel keeps its
        // total (reflection only moves mass at the border, none here: the pixel is central).
        let c = Array3::<f32>::from_elem((9, 9, 1), 0.3);
        assert!(blur_grid(&c, 1.5).iter().all(|v| (v - 0.3).abs() < 1e-6));
        let mut d = Array3::<f32>::zeros((21, 21, 1));
        d[[10, 10, 0]] = 1.0;
        let b = blur_grid(&d, 1.0);
        assert!((b.sum() - 1.0).abs() < 1e-5);
        assert!(b[[10, 10, 0]] > b[[10, 11, 0]] && b[[10, 11, 0]] > b[[10, 12, 0]]);
        // Separable Gaussian: value at (10,11) / value at (10,10) = exp(-1/2) for sigma 1.
        assert!((b[[10, 11, 0]] / b[[10, 10, 0]] - (-0.5f32).exp()).abs() < 1e-5);
    }
}
