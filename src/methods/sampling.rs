//! The sampling methods: SmoothGrad (Smilkov et al. 2017) and expected gradients (Erion et al.
//! 2021), both means over seeded draws.

use anyhow::Result;
use ndarray::ArrayD;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal, Uniform};

use super::{Job, Outcome, gap_of};

pub(super) fn smoothgrad(job: &Job, noise: f32, samples: usize, seed: u64) -> Result<Outcome> {
    let x = job.x;
    let n = samples.max(1);
    let (lo, hi) = x.iter().fold((f32::INFINITY, f32::NEG_INFINITY), |(a, b), v| (a.min(*v), b.max(*v)));
    let sd = noise * (hi - lo).max(f32::EPSILON);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let xs: Vec<ArrayD<f32>> = (0..n)
        .map(|_| {
            x.mapv(|v| {
                let z: f32 = StandardNormal.sample(&mut rng);
                v + sd * z
            })
        })
        .collect();
    job.ctl.begin(n as u64);
    let gs = job.grads(&xs)?;
    let mut acc = ArrayD::<f32>::zeros(x.raw_dim());
    for g in &gs {
        acc += &g.grad;
    }
    Ok(Outcome { map: acc / n as f32, steps: Some(n), score_baseline: None, gap: None, completeness: None })
}

/// `baseline(draw)` builds draw `draw` of the request's baseline.
pub(super) fn expected_gradients(
    job: &Job,
    baseline: &dyn Fn(u64) -> Result<ArrayD<f32>>,
    distribution: bool,
    samples: usize,
    seed: u64,
) -> Result<Outcome> {
    let x = job.x;
    let n = samples.max(1);
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let unif = Uniform::new(0.0f32, 1.0).expect("valid range");
    let mut bases = Vec::with_capacity(n);
    let mut points = Vec::with_capacity(n);
    for k in 0..n {
        let draw = if distribution { k as u64 } else { 0 };
        let b = baseline(draw ^ (seed << 20))?;
        let a = unif.sample(&mut rng);
        points.push(&b + &((x - &b) * a));
        bases.push(b);
    }
    job.ctl.begin(2 * n as u64);
    let gs = job.grads(&points)?;
    let fb = job.model.forward_many(&bases, job.scorer.tap, job.ctl)?;
    let mut acc = ArrayD::<f32>::zeros(x.raw_dim());
    for (g, b) in gs.iter().zip(&bases) {
        acc += &(&g.grad * &(x - b));
    }
    let map = acc / n as f32;
    let mean_fb = fb.iter().map(|v| job.scorer.score(v) as f64).sum::<f64>() / n as f64;
    let gap = gap_of(map.sum() as f64, job.score_x as f64 - mean_fb);
    Ok(Outcome { map, steps: Some(n), score_baseline: Some(mean_fb as f32), gap, completeness: None })
}
