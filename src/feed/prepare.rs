//! From a picture to the model's input tensor, and from a tensor-shaped map back to the picture.
//!
//! Feeding happens in two stages so that baselines can act in image space before
//! normalisation: [`Feeder::prepare`] resamples the picture onto the model's grid (H×W×C, values
//! still 0..1), [`Feeder::normalise`] scales, normalises and lays it out as the tensor.
//!
//! Per-image standardisation (`normalise = "per-image"`) takes the mean and standard deviation of
//! the picture being read, on the model grid, once ([`Feeder::for_picture`]), and applies the
//! same two numbers to every variant of it a method feeds (baselines, occluded and painted
//! copies, path points): the feed stays one affine map, which the gradients go through.
//!
//! Resampling is linear, one weight matrix per axis whose rows sum to one: area averaging when
//! shrinking (so 256→128 is an exact 2×2 mean), bilinear with half-pixel centres when growing.
//! Mapping a map back uses the transpose of the same matrices, which keeps the map's total: a
//! tensor pixel's attribution is shared among the image pixels it was made from, in the
//! proportions they contributed.

use anyhow::{Result, bail};
use ndarray::{Array2, Array3, ArrayD, Axis, IxDyn, s};

use super::card::{FeedCard, GreyRule, Layout, Normalise, Resize, Scale};
use super::picture::{LUMA, Picture};

/// How the picture's channels became the model's.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum ChannelRule {
    Same,
    /// Gray picture replicated to three channels.
    Replicate,
    /// RGB picture reduced to luminance.
    Luma,
}

/// The geometry of one picture fed through one card; keeps what is needed to map back.
#[derive(Clone, Debug)]
pub struct Feeder {
    card: FeedCard,
    src_h: usize,
    src_w: usize,
    rows: Array2<f32>,
    cols: Array2<f32>,
    channels: ChannelRule,
    /// Per-image standardisation's mean and standard deviation, fixed from the picture read.
    standardise: Option<Standardise>,
}

/// The mean and standard deviation per-image standardisation subtracts and divides by.
#[derive(Clone, Copy, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Standardise {
    pub mean: f32,
    pub std: f32,
}

impl Standardise {
    /// The grid's mean and standard deviation over all pixels and channels, the deviation at
    /// least 1/√N so that a flat picture is not divided by zero (the rule TensorFlow's
    /// per_image_standardization documents). Sums in f64.
    pub fn of(grid: &Array3<f32>) -> Standardise {
        let n = grid.len().max(1) as f64;
        let mean = grid.iter().map(|v| *v as f64).sum::<f64>() / n;
        let var = grid.iter().map(|v| (*v as f64 - mean).powi(2)).sum::<f64>() / n;
        Standardise { mean: mean as f32, std: var.sqrt().max(1.0 / n.sqrt()) as f32 }
    }
}

/// Weight matrix (n_out × n_in) resampling one axis; every row sums to 1.
pub fn axis_weights(n_in: usize, n_out: usize) -> Array2<f32> {
    let mut m = Array2::<f32>::zeros((n_out, n_in));
    if n_out < n_in {
        // Area: output j covers [j*r, (j+1)*r) of the input, r = n_in / n_out.
        let r = n_in as f64 / n_out as f64;
        for j in 0..n_out {
            let (a, b) = (j as f64 * r, (j + 1) as f64 * r);
            let mut i = a.floor() as usize;
            while (i as f64) < b && i < n_in {
                let overlap = (b.min(i as f64 + 1.0) - a.max(i as f64)).max(0.0);
                m[[j, i]] += (overlap / r) as f32;
                i += 1;
            }
        }
    } else {
        let r = n_in as f64 / n_out as f64;
        for j in 0..n_out {
            let src = ((j as f64 + 0.5) * r - 0.5).clamp(0.0, (n_in - 1) as f64);
            let i0 = src.floor() as usize;
            let f = src - i0 as f64;
            let i1 = (i0 + 1).min(n_in - 1);
            m[[j, i0]] += (1.0 - f) as f32;
            m[[j, i1]] += f as f32;
        }
    }
    m
}

impl Feeder {
    /// Plans feeding a picture of `h`×`w` with `c` channels through `card`.
    pub fn new(card: &FeedCard, h: usize, w: usize, c: usize) -> Result<Feeder> {
        let want_c = card.input.channels;
        let channels = match (c, want_c) {
            (a, b) if a == b => ChannelRule::Same,
            (1, 3) if card.input.grey_to_rgb == GreyRule::Replicate => ChannelRule::Replicate,
            (1, 3) => bail!(
                "the model takes 3 channels but the image is grayscale, and the feed card says \
                 grey_to_rgb = \"refuse\". Set grey_to_rgb = \"replicate\" in the card, or convert the image."
            ),
            (3, 1) => ChannelRule::Luma,
            (a, b) => bail!("cannot feed a {a}-channel image to a {b}-channel model"),
        };
        let (th, tw) = (card.input.height, card.input.width);
        let (rows, cols) = match card.input.resize {
            Resize::Stretch => (axis_weights(h, th), axis_weights(w, tw)),
            Resize::ShorterSideCrop => {
                let s = (th as f64 / h as f64).max(tw as f64 / w as f64);
                let sh = ((h as f64 * s).round() as usize).max(th);
                let sw = ((w as f64 * s).round() as usize).max(tw);
                let (oy, ox) = ((sh - th) / 2, (sw - tw) / 2);
                let r = axis_weights(h, sh).slice(s![oy..oy + th, ..]).to_owned();
                let c = axis_weights(w, sw).slice(s![ox..ox + tw, ..]).to_owned();
                (r, c)
            }
        };
        Ok(Feeder { card: card.clone(), src_h: h, src_w: w, rows, cols, channels, standardise: None })
    }

    /// Plans feeding `pic`; under per-image standardisation its mean and deviation are taken
    /// here, for every variant of the picture fed later.
    pub fn for_picture(card: &FeedCard, pic: &Picture) -> Result<Feeder> {
        let mut f = Self::new(card, pic.height(), pic.width(), pic.channels())?;
        if card.input.normalise == Normalise::PerImage {
            f.standardise = Some(Standardise::of(&f.prepare(&pic.pixels)?));
        }
        Ok(f)
    }

    /// How the picture's channels become the model's.
    pub fn channel_rule(&self) -> ChannelRule {
        self.channels
    }

    /// Per-image standardisation's numbers (`None` under a fixed mean and std).
    pub fn standardise(&self) -> Option<Standardise> {
        self.standardise
    }

    pub fn card(&self) -> &FeedCard {
        &self.card
    }

    /// The picture on the model's grid: th×tw×C_model, values 0..1.
    pub fn prepare(&self, pixels: &Array3<f32>) -> Result<Array3<f32>> {
        let (h, w, _) = pixels.dim();
        if (h, w) != (self.src_h, self.src_w) {
            bail!("image is {w}×{h} but this feed was planned for {}×{}", self.src_w, self.src_h);
        }
        let src = match self.channels {
            ChannelRule::Luma => super::picture::luminance(pixels).insert_axis(Axis(2)),
            _ => pixels.to_owned(),
        };
        let sc = src.shape()[2];
        let (th, tw) = (self.rows.nrows(), self.cols.nrows());
        let mut out_c = Array3::<f32>::zeros((th, tw, sc));
        for k in 0..sc {
            let plane = src.index_axis(Axis(2), k);
            let r = self.rows.dot(&plane).dot(&self.cols.t());
            out_c.index_axis_mut(Axis(2), k).assign(&r);
        }
        Ok(match self.channels {
            ChannelRule::Replicate => {
                let g = out_c.index_axis(Axis(2), 0).to_owned();
                Array3::from_shape_fn((th, tw, 3), |(y, x, _)| g[[y, x]])
            }
            _ => out_c,
        })
    }

    /// A model-grid array (th×tw×C, 0..1) as the input tensor: scaled, normalised, laid out.
    pub fn normalise(&self, grid: &Array3<f32>) -> ArrayD<f32> {
        to_tensor(&self.card, grid, self.standardise)
    }

    /// The inverse of [`Feeder::normalise`]: a tensor back to a 0..1 grid.
    pub fn to_grid(&self, t: &ArrayD<f32>) -> Result<Array3<f32>> {
        let g = tensor_to_grid_layout(&self.card, t)?;
        let (mean, std) = per_channel(&self.card, self.standardise);
        let scale = scale_of(&self.card);
        Ok(Array3::from_shape_fn(g.dim(), |(y, x, k)| (g[[y, x, k]] * std[k] + mean[k]) / scale))
    }

    /// `prepare` then `normalise`.
    pub fn tensor(&self, pixels: &Array3<f32>) -> Result<ArrayD<f32>> {
        Ok(self.normalise(&self.prepare(pixels)?))
    }

    /// A tensor-shaped map (e.g. an attribution) back on the picture: H×W×C_picture. The total
    /// is kept (see the module docs).
    pub fn map_back(&self, tensor_map: &ArrayD<f32>) -> Result<Array3<f32>> {
        let grid = tensor_to_grid_layout(&self.card, tensor_map)?;
        let (th, tw, _) = grid.dim();
        let planes: Vec<Array2<f32>> = match self.channels {
            ChannelRule::Same => (0..grid.shape()[2]).map(|k| grid.index_axis(Axis(2), k).to_owned()).collect(),
            ChannelRule::Replicate => vec![grid.sum_axis(Axis(2))],
            ChannelRule::Luma => {
                let a = grid.index_axis(Axis(2), 0).to_owned();
                LUMA.iter().map(|w| &a * *w).collect()
            }
        };
        debug_assert!(planes.iter().all(|p| p.dim() == (th, tw)));
        let mut out = Array3::<f32>::zeros((self.src_h, self.src_w, planes.len()));
        for (k, p) in planes.iter().enumerate() {
            let back = self.rows.t().dot(p).dot(&self.cols);
            out.index_axis_mut(Axis(2), k).assign(&back);
        }
        Ok(out)
    }
}

fn scale_of(card: &FeedCard) -> f32 {
    match card.input.scale {
        Scale::Unit => 1.0,
        Scale::Byte => 255.0,
    }
}

/// The per-channel mean and std subtracted and divided by after scaling.
fn per_channel(card: &FeedCard, standardise: Option<Standardise>) -> (Vec<f32>, Vec<f32>) {
    match (card.input.normalise, standardise) {
        (Normalise::PerImage, Some(s)) => {
            let c = card.input.channels;
            let k = scale_of(card);
            (vec![s.mean * k; c], vec![s.std * k; c])
        }
        _ => card.mean_std(),
    }
}

fn to_tensor(card: &FeedCard, grid: &Array3<f32>, standardise: Option<Standardise>) -> ArrayD<f32> {
    let standardise = match card.input.normalise {
        Normalise::PerImage => Some(standardise.unwrap_or_else(|| Standardise::of(grid))),
        Normalise::Fixed => None,
    };
    let (mean, std) = per_channel(card, standardise);
    let scale = scale_of(card);
    let (h, w, c) = grid.dim();
    let v = |y: usize, x: usize, k: usize| (grid[[y, x, k]] * scale - mean[k]) / std[k];
    match card.input.layout {
        Layout::Nchw => ArrayD::from_shape_fn(IxDyn(&[1, c, h, w]), |i| v(i[2], i[3], i[1])),
        Layout::Nhwc => ArrayD::from_shape_fn(IxDyn(&[1, h, w, c]), |i| v(i[1], i[2], i[3])),
    }
}

/// Scales, normalises and lays out a grid (th×tw×C, 0..1) as the card's tensor; per-image
/// standardisation takes this grid's own mean and deviation.
pub fn grid_to_tensor(card: &FeedCard, grid: &Array3<f32>) -> ArrayD<f32> {
    to_tensor(card, grid, None)
}

/// The inverse of [`grid_to_tensor`] under a fixed mean and std: a tensor back to a 0..1 grid
/// (per-image standardisation needs the picture's numbers: use [`Feeder::to_grid`]).
pub fn tensor_to_grid(card: &FeedCard, t: &ArrayD<f32>) -> Result<Array3<f32>> {
    if card.input.normalise == Normalise::PerImage {
        bail!("a per-image standardised tensor goes back to a grid only with its picture's numbers (Feeder::to_grid)");
    }
    let g = tensor_to_grid_layout(card, t)?;
    let (mean, std) = card.mean_std();
    let scale = scale_of(card);
    Ok(Array3::from_shape_fn(g.dim(), |(y, x, k)| (g[[y, x, k]] * std[k] + mean[k]) / scale))
}

/// Reorders a batch-1 tensor to th×tw×C without touching values.
fn tensor_to_grid_layout(card: &FeedCard, t: &ArrayD<f32>) -> Result<Array3<f32>> {
    let want = card.tensor_shape();
    if t.shape() != want.as_slice() {
        bail!("tensor has shape {:?}, the feed card makes {:?}", t.shape(), want);
    }
    let t4 = t.view().into_dimensionality::<ndarray::Ix4>()?;
    let g = match card.input.layout {
        Layout::Nchw => t4.index_axis(Axis(0), 0).permuted_axes([1, 2, 0]).to_owned(),
        Layout::Nhwc => t4.index_axis(Axis(0), 0).to_owned(),
    };
    Ok(g.as_standard_layout().to_owned())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::feed::card::{InputCard, OutputCard};

    fn card(c: usize, h: usize, w: usize, layout: Layout, resize: Resize) -> FeedCard {
        FeedCard {
            input: InputCard {
                layout,
                channels: c,
                height: h,
                width: w,
                resize,
                grey_to_rgb: GreyRule::Replicate,
                scale: Scale::Byte,
                mean: vec![10.0],
                std: vec![2.0],
                window: None,
                normalise: Normalise::Fixed,
            },
            output: OutputCard::default(),
            origin: Default::default(),
        }
    }

    #[test]
    fn halving_is_an_exact_two_by_two_mean() {
        let m = axis_weights(4, 2);
        assert_eq!(m, ndarray::arr2(&[[0.5, 0.5, 0.0, 0.0], [0.0, 0.0, 0.5, 0.5]]));
        let m = axis_weights(3, 2); // r = 1.5: [0,1.5) and [1.5,3)
        assert_eq!(m, ndarray::arr2(&[[2.0 / 3.0, 1.0 / 3.0, 0.0], [0.0, 1.0 / 3.0, 2.0 / 3.0]]));
        for n in [(7, 3), (3, 7), (5, 5), (1, 4)] {
            let m = axis_weights(n.0, n.1);
            for r in m.rows() {
                assert!((r.sum() - 1.0).abs() < 1e-6);
            }
        }
    }

    #[test]
    fn tensor_values_follow_scale_mean_std_and_layout() {
        // Gray 4×4 image to a 3-channel 2×2 NHWC model: mean of each 2×2 block, ×255, −10, /2.
        let px = Array3::from_shape_fn((4, 4, 1), |(y, x, _)| if y < 2 && x < 2 { 1.0 } else { 0.0 });
        let c = card(3, 2, 2, Layout::Nhwc, Resize::Stretch);
        let f = Feeder::new(&c, 4, 4, 1).unwrap();
        let t = f.tensor(&px).unwrap();
        assert_eq!(t.shape(), &[1, 2, 2, 3]);
        assert_eq!(t[[0, 0, 0, 2]], (255.0 - 10.0) / 2.0);
        assert_eq!(t[[0, 1, 1, 0]], -5.0);
        let back = f.to_grid(&t).unwrap();
        assert!((back[[0, 0, 1]] - 1.0).abs() < 1e-6);
    }

    #[test]
    fn map_back_keeps_the_total_and_puts_it_where_it_came_from() {
        let c = card(3, 2, 3, Layout::Nchw, Resize::ShorterSideCrop);
        let f = Feeder::new(&c, 4, 8, 1).unwrap(); // scale 0.5 → 2×4, centre crop columns 0..3 of 4 → offset 0
        let mut m = ArrayD::<f32>::zeros(IxDyn(&[1, 3, 2, 3]));
        m[[0, 0, 1, 2]] = 3.0;
        m[[0, 2, 1, 2]] = 1.0;
        let back = f.map_back(&m).unwrap();
        assert_eq!(back.dim(), (4, 8, 1));
        assert!((back.sum() - 4.0).abs() < 1e-5);
        // Tensor pixel (1,2) came from image rows 2..4, columns 4..6: one each of the four.
        for (y, x) in [(2, 4), (2, 5), (3, 4), (3, 5)] {
            assert!((back[[y, x, 0]] - 1.0).abs() < 1e-6);
        }
    }

    #[test]
    fn per_image_numbers_come_from_the_picture_and_hold_for_its_variants() {
        let mut c = card(1, 4, 4, Layout::Nchw, Resize::Stretch);
        c.input.scale = Scale::Unit;
        (c.input.mean, c.input.std, c.input.normalise) = (vec![], vec![], Normalise::PerImage);
        // A checkerboard of 0 and 1: mean 0.5, population deviation 0.5 (above the floor 1/√16).
        let px = Array3::from_shape_fn((4, 4, 1), |(y, x, _)| ((y + x) % 2) as f32);
        let f = Feeder::for_picture(&c, &Picture::new(px.clone(), 8)).unwrap();
        assert_eq!(f.standardise(), Some(Standardise { mean: 0.5, std: 0.5 }));
        let t = f.tensor(&px).unwrap();
        assert_eq!((t[[0, 0, 1, 0]], t[[0, 0, 0, 0]]), (1.0, -1.0));
        // A black baseline goes through the picture's numbers, not its own (zero) spread.
        let b = f.normalise(&Array3::zeros((4, 4, 1)));
        assert_eq!(b[[0, 0, 2, 3]], -1.0);
        // A flat picture's deviation is held at 1/√N.
        assert_eq!(Standardise::of(&Array3::from_elem((2, 2, 1), 0.3)).std, 0.5);
        assert!(tensor_to_grid(&c, &t).is_err(), "the inverse needs the picture's numbers");
        assert_eq!(f.to_grid(&t).unwrap(), px);
    }

    #[test]
    fn refuse_rule_stops_gray_for_rgb() {
        let mut c = card(3, 2, 2, Layout::Nchw, Resize::Stretch);
        c.input.grey_to_rgb = GreyRule::Refuse;
        let e = Feeder::new(&c, 4, 4, 1).unwrap_err().to_string();
        assert!(e.contains("grey_to_rgb"), "{e}");
    }
}
