//! Speed bench: spurion against its reference peers, measured in one run on this machine with the
//! same thread count. Prints medians and ratios; asserts nothing about time (the machine is
//! shared and noisy), but it does check that both sides computed the same result.
//!
//!   SPURION_BENCH_PYTHON=/path/to/venv/bin/python cargo bench --bench speed
//!
//! The Python needs torch, torchvision, onnx and onnxruntime (PyTorch is installed by hand, not
//! in CI). `benches/peer_speed.py` builds a ResNet-18 with random weights, exports it, and times
//! integrated gradients with PyTorch CPU autograd and occlusion with onnxruntime forwards.
//! Environment: SPURION_BENCH_REPEATS (default 3), SPURION_BENCH_THREADS (default: all cores).
//!
//! Tasks (issue targets in brackets):
//!   integrated gradients, 64 steps, black baseline, ResNet-18 at 224×224   [≤ 1.5× PyTorch]
//!   occlusion, window 16, stride 8, black fill, same model                  [≤ 1.0× onnxruntime]

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use anyhow::{Context, Result, bail};
use ndarray::ArrayD;
use serde_json::Value;
use spurion::control::Control;
use spurion::methods::{Baseline, Input, Method, Request, Rule, ScoreKind, TargetSpec, explain};
use spurion::model::{LoadOptions, Model};

fn median(v: &[f64]) -> f64 {
    let mut s = v.to_vec();
    s.sort_by(|a, b| a.total_cmp(b));
    let n = s.len();
    if n % 2 == 1 { s[n / 2] } else { (s[n / 2 - 1] + s[n / 2]) / 2.0 }
}

fn env_usize(name: &str, default: usize) -> Result<usize> {
    match std::env::var(name) {
        Ok(v) => v.parse().with_context(|| format!("{name}={v} is not a whole number")),
        Err(_) => Ok(default),
    }
}

fn run_peer(py: &Path, dir: &Path, threads: usize, repeats: usize) -> Result<Value> {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/peer_speed.py");
    eprintln!("peer: {} {} (PyTorch autograd, onnxruntime) ...", py.display(), script.display());
    let out = Command::new(py)
        .arg(&script)
        .arg(dir)
        .arg(threads.to_string())
        .arg(repeats.to_string())
        .output()
        .with_context(|| format!("starting {}", py.display()))?;
    if !out.status.success() {
        bail!(
            "the peer script failed (does {} have torch, torchvision and onnxruntime?):\n{}",
            py.display(),
            String::from_utf8_lossy(&out.stderr)
        );
    }
    serde_json::from_slice(&out.stdout).context("reading the peer's JSON")
}

fn time_reading(model: &Model, x: &ArrayD<f32>, req: &Request, repeats: usize) -> Result<(Vec<f64>, spurion::methods::Reading)> {
    let input = Input::tensor(x.clone(), "x.npy");
    let mut times = vec![];
    let mut last = None;
    for _ in 0..repeats {
        let t0 = Instant::now();
        let r = explain(model, None, &input, req, &Control::new())?;
        times.push(t0.elapsed().as_secs_f64());
        last = Some(r);
    }
    Ok((times, last.expect("at least one repeat")))
}

fn main() -> Result<()> {
    // `cargo bench` passes --bench; nothing else is taken.
    let repeats = env_usize("SPURION_BENCH_REPEATS", 3)?.max(1);
    let cores = std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1);
    let threads = env_usize("SPURION_BENCH_THREADS", cores)?.max(1);
    rayon::ThreadPoolBuilder::new().num_threads(threads).build_global()?;
    let py = match std::env::var_os("SPURION_BENCH_PYTHON") {
        Some(p) => PathBuf::from(p),
        None => {
            eprintln!(
                "speed bench skipped: set SPURION_BENCH_PYTHON to a Python with torch, torchvision \
                 and onnxruntime (see DEVELOPERS.md, 'Benchmarks')"
            );
            return Ok(());
        }
    };
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("target/bench-speed");
    std::fs::create_dir_all(&dir)?;
    let peer = run_peer(&py, &dir, threads, repeats)?;
    let target = peer["target"].as_u64().context("peer target")? as usize;
    let model = Model::load(&dir.join("resnet18.onnx"), &LoadOptions::default())?;
    let x: ArrayD<f32> = spurion::feed::read_tensor(&dir.join("x.npy"))?;

    let ig = Request {
        method: Method::IntegratedGradients { steps: 64, rule: Rule::Midpoint, adaptive: None },
        baseline: Baseline::Black,
        target: TargetSpec::Index(target),
        score: ScoreKind::Raw,
    };
    eprintln!("spurion: integrated gradients, 64 steps ...");
    let (ig_times, ig_r) = time_reading(&model, &x, &ig, repeats)?;
    let peer_sum = peer["ig_sum"].as_f64().context("peer ig_sum")?;
    let sum_err = (ig_r.attribution_sum - peer_sum).abs() / peer_sum.abs().max(1e-6);

    let occ = Request { method: Method::Occlusion { window: 16, stride: 8 }, ..ig.clone() };
    eprintln!("spurion: occlusion, window 16, stride 8 ...");
    let (occ_times, occ_r) = time_reading(&model, &x, &occ, repeats)?;
    let ort_map: ArrayD<f32> = spurion::feed::read_tensor(&dir.join("occlusion-ort.npy"))?;
    let ours = occ_r.map2d();
    let scale = ort_map.iter().fold(1e-6f32, |m, v| m.max(v.abs()));
    let occ_err = ours.iter().zip(ort_map.iter()).fold(0f32, |m, (a, b)| m.max((a - b).abs())) / scale;

    let peer_occ = peer["occlusion_single_median"].as_f64().unwrap_or(f64::NAN)
        .min(peer["occlusion_batched_median"].as_f64().unwrap_or(f64::NAN));
    let rows = [
        ("integrated gradients, 64 steps", median(&ig_times), "PyTorch autograd", peer["ig_median"].as_f64().unwrap_or(f64::NAN), 1.5),
        ("occlusion, window 16 stride 8", median(&occ_times), "onnxruntime (best of single/batch 32)", peer_occ, 1.0),
    ];
    println!();
    println!(
        "ResNet-18 (random weights), 1×3×224×224, {threads} threads, {repeats} repeats; torch {}, onnxruntime {}",
        peer["torch"].as_str().unwrap_or("?"),
        peer["onnxruntime"].as_str().unwrap_or("?")
    );
    println!("{:<32} {:>12} {:>12} {:>8} {:>8}  peer", "task", "spurion s", "peer s", "ratio", "target");
    for (task, ours, peer_name, theirs, goal) in rows {
        println!("{task:<32} {ours:>12.2} {theirs:>12.2} {:>7.2}× {goal:>7.1}×  {peer_name}", ours / theirs);
    }
    println!(
        "onnxruntime occlusion: single {:.2} s, batch 32 {:.2} s (medians)",
        peer["occlusion_single_median"].as_f64().unwrap_or(f64::NAN),
        peer["occlusion_batched_median"].as_f64().unwrap_or(f64::NAN)
    );
    println!("spurion times (s): ig {ig_times:.2?}, occlusion {occ_times:.2?}");
    println!("same results: IG attribution sum rel. difference {sum_err:.2e}, occlusion map max rel. difference {occ_err:.2e}");
    if sum_err > 1e-3 || occ_err > 1e-3 {
        bail!("spurion and the peer disagree on the result; the timings compare different work");
    }
    Ok(())
}
