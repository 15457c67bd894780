//! Occlusion (Zeiler and Fergus 2014): the score drop when a window is replaced by the baseline,
//! averaged over the windows that cover each pixel.

use anyhow::{Result, bail};
use ndarray::{Array2, ArrayD};

use super::{Job, Outcome};

/// Start positions of windows along one axis: every `stride`, plus the last full window so
/// every pixel is covered.
pub fn window_starts(n: usize, window: usize, stride: usize) -> Vec<usize> {
    if window >= n {
        return vec![0];
    }
    let mut v: Vec<usize> = (0..=n - window).step_by(stride.max(1)).collect();
    if *v.last().unwrap() != n - window {
        v.push(n - window);
    }
    v
}

pub(super) fn occlusion(job: &Job, xb: &ArrayD<f32>, window: usize, stride: usize) -> Result<Outcome> {
    if window == 0 || stride == 0 {
        bail!("occlusion window and stride must be at least 1 pixel");
    }
    let (x, spatial, scorer, ctl) = (job.x, job.spatial, job.scorer, job.ctl);
    let (h, w) = (x.shape()[spatial[0]], x.shape()[spatial[1]]);
    let ys = window_starts(h, window, stride);
    let xs = window_starts(w, window, stride);
    let wins: Vec<(usize, usize)> = ys.iter().flat_map(|y| xs.iter().map(move |x| (*y, *x))).collect();
    ctl.begin(wins.len() as u64 + 1);
    let fb = scorer.score(&job.model.forward(xb, scorer.tap)?);
    ctl.advance(1);
    let mut total = Array2::<f64>::zeros((h, w));
    let mut count = Array2::<f64>::zeros((h, w));
    // All windows in one call: the incremental plan is prepared once for the whole set.
    let outs = job.model.occluded_outputs(x, xb, spatial, window, &wins, scorer.tap, ctl)?;
    for (&(y0, x0), o) in wins.iter().zip(&outs) {
        let d = (job.score_x - scorer.score(o)) as f64;
        let (y1, x1) = ((y0 + window).min(h), (x0 + window).min(w));
        for yy in y0..y1 {
            for xx in x0..x1 {
                total[[yy, xx]] += d;
                count[[yy, xx]] += 1.0;
            }
        }
    }
    let per_pixel = Array2::from_shape_fn((h, w), |(i, j)| (total[[i, j]] / count[[i, j]].max(1.0)) as f32);
    // Spread each pixel's value evenly over its channels, so channel sums give the pixel map.
    let channels: usize = x.len() / (h * w);
    let map = ArrayD::from_shape_fn(x.raw_dim(), |i| per_pixel[[i[spatial[0]], i[spatial[1]]]] / channels as f32);
    Ok(Outcome { map, steps: Some(wins.len()), score_baseline: Some(fb), gap: None, completeness: None })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn windows_cover_every_pixel() {
        assert_eq!(window_starts(10, 4, 3), vec![0, 3, 6]);
        assert_eq!(window_starts(11, 4, 3), vec![0, 3, 6, 7]);
        assert_eq!(window_starts(3, 4, 3), vec![0]);
    }
}
