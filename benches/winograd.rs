//! `cargo bench --bench winograd`: one 3×3 stride-1 convolution per ResNet-18 stage (64 channels
//! at 56², 128 at 28², 256 at 14², 512 at 7²), batch 1, on this thread: tract's own convolution
//! plan against spurion's Winograd F(2×2, 3×3) and its adjoint (the reverse step), medians of
//! `SPURION_BENCH_REPEATS` (default 40) runs each, with the ratio and the largest difference.
//! This is the measurement behind the 14×14 threshold in `graph::winograd::for_conv`.

use std::time::Instant;

use spurion::graph::winograd::Winograd;
use tract_onnx::prelude::*;
use tract_onnx::tract_core::ops::cnn::{Conv, KernelFormat, PaddingSpec, PoolSpec};
use tract_onnx::tract_core::ops::nn::DataFormat;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

fn time(repeats: usize, mut f: impl FnMut()) -> f64 {
    f();
    median(
        (0..repeats)
            .map(|_| {
                let t = Instant::now();
                f();
                t.elapsed().as_secs_f64()
            })
            .collect(),
    )
}

fn main() -> anyhow::Result<()> {
    let repeats = std::env::var("SPURION_BENCH_REPEATS")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or(40);
    println!("plane      tract ms   Winograd ms  ratio   adjoint ms  ratio   largest difference  kernel");
    for (c, hw) in [(64usize, 56usize), (128, 28), (256, 14), (512, 7)] {
        let k: Vec<f32> = (0..c * c * 9)
            .map(|i| ((i * 7919) % 1000) as f32 / 1000.0 - 0.5)
            .collect();
        let x: Vec<f32> = (0..c * hw * hw)
            .map(|i| ((i * 104729) % 1000) as f32 / 1000.0 - 0.5)
            .collect();
        let mut m = TypedModel::default();
        let s = m.add_source("x", f32::fact([1, c, hw, hw]))?;
        let kt = m.add_const("k", Tensor::from_shape(&[c, c, 3, 3], &k)?)?;
        let b = m.add_const("b", Tensor::zero_scalar::<f32>()?)?;
        let pad = PaddingSpec::Explicit(tvec![1, 1], tvec![1, 1]);
        let spec = PoolSpec::new(DataFormat::NCHW, tvec![3, 3], pad, None, None, c, c);
        let y = m.wire_node(
            "y",
            Conv::new(spec, KernelFormat::OIHW, 1, None),
            &[s, kt, b],
        )?;
        m.select_output_outlets(&y)?;
        let plan = TypedSimplePlan::new(m.into_optimized()?)?;
        let xt = Tensor::from_shape(&[1, c, hw, hw], &x)?;
        let tiles = hw.div_ceil(2).pow(2);
        let wino = Winograd::new(&k, c, c, None, [1, 1, 1, 1], tiles)?;
        let adjoint = wino.adjoint(tiles)?;

        let want = plan.run(tvec![xt.clone().into_tvalue()])?;
        let want: Vec<f32> = want[0]
            .to_plain_array_view::<f32>()?
            .iter()
            .copied()
            .collect();
        let got = wino.run(&x, 1, hw, hw)?;
        let worst = want
            .iter()
            .zip(&got)
            .map(|(a, b)| (a - b).abs())
            .fold(0f32, f32::max);
        let scale = want.iter().map(|a| a.abs()).fold(0f32, f32::max);

        let t_tract = time(repeats, || {
            drop(plan.run(tvec![xt.clone().into_tvalue()]).unwrap())
        });
        let t_wino = time(repeats, || drop(wino.run(&x, 1, hw, hw).unwrap()));
        let t_adj = time(repeats, || drop(adjoint.run(&x, 1, hw, hw).unwrap()));
        println!(
            "{c:3} @ {hw:2}²  {:9.3}  {:11.3}  {:5.2}×  {:10.3}  {:5.2}×   {:.1e} of {scale:.2}   {}",
            t_tract * 1e3,
            t_wino * 1e3,
            t_wino / t_tract,
            t_adj * 1e3,
            t_adj / t_tract,
            worst,
            wino.kernel_name()
        );
    }
    Ok(())
}
