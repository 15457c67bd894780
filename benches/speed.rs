//! Speed bench: spurion against its reference peers, each peer at its best setting, measured in
//! one run on this machine with the same thread count. Prints medians and ratios; asserts nothing
//! about time (the machine is shared and noisy), but it does check that both sides computed the
//! same result.
//!
//!   SPURION_BENCH_PYTHON=/path/to/venv/bin/python cargo bench --bench speed
//!
//! The Python needs torch, torchvision, onnx and onnxruntime (PyTorch is installed by hand, not
//! in CI). `benches/peer_speed.py` builds a ResNet-18 with random weights, exports it, and times
//! every peer setting (see its header); the table compares spurion with the fastest.
//! Environment: SPURION_BENCH_REPEATS (default 3), SPURION_BENCH_THREADS (default: all cores),
//! SPURION_BENCH_TASKS (comma-separated among ig, occlusion, refine, saturating, vit, cli; default
//! all),
//! SPURION_BENCH_PEERS=0 (spurion only, on the files of an earlier run: for profiling).
//!
//! Tasks (issue 11's targets in brackets):
//!   integrated gradients, 64 midpoint steps, black baseline, ResNet-18 at 224²   [≤ 1.0× PyTorch]
//!   occlusion, window 16, stride 8, black fill, same model                       [≤ 0.8× onnxruntime]
//!   time to a 1 % completeness gap: spurion's default refinement (cells refined where the
//!   path needs them) against PyTorch's midpoint rule at 8, 16, 32, ... steps      [≤ 0.6×, issue 25]
//!   gradients to a 1 % gap on a saturating model (tests/fixtures/methods/saturating.onnx):
//!   spurion's refinement against the best uniform rule (midpoint, trapezoid, Gauss–Legendre at
//!   4, 8, ..., 4096 points), counted, not timed                                  [≤ 1/10, issue 25]
//!   integrated gradients, 64 midpoint steps, black baseline, ViT-B/16 at 224²     [≤ 1.0× PyTorch]
//!   (issue 24), with the peak resident memory of both: spurion's is this process's high-water
//!   mark from just before loading the ViT (reset through /proc/self/clear_refs), PyTorch's the
//!   ru_maxrss of a fresh process running its best setting once (interpreter and torch included).
//!   one CLI reading, set-up included: `spurion explain` (IG, 64 midpoint steps, black baseline) as
//!   a fresh process against a fresh Python process doing the same at PyTorch's best setting
//!   [≤ 1.0×]; and one default reading of the demo, timed alone.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use anyhow::{Context, Result, bail};
use ndarray::ArrayD;
use serde_json::Value;
use spurion::control::Control;
use spurion::methods::{Baseline, Input, Method, Reading, Request, Rule, ScoreKind, TargetSpec, explain};
use spurion::model::{LoadOptions, Model};

fn median(v: &[f64]) -> f64 {
    let mut s = v.to_vec();
    s.sort_by(|a, b| a.total_cmp(b));
    let n = s.len();
    if n == 0 {
        return f64::NAN;
    }
    if n % 2 == 1 { s[n / 2] } else { (s[n / 2 - 1] + s[n / 2]) / 2.0 }
}

fn env_usize(name: &str, default: usize) -> Result<usize> {
    match std::env::var(name) {
        Ok(v) => v.parse().with_context(|| format!("{name}={v} is not a whole number")),
        Err(_) => Ok(default),
    }
}

fn run_peer(py: &Path, dir: &Path, threads: usize, repeats: usize, mode: &[&str]) -> Result<Value> {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/peer_speed.py");
    eprintln!("peer: {} {} {} (PyTorch autograd, onnxruntime; every setting) ...", py.display(), script.display(), mode.join(" "));
    let out = Command::new(py)
        .arg(&script)
        .arg(dir)
        .arg(threads.to_string())
        .arg(repeats.to_string())
        .args(mode)
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

/// This process's peak resident memory in MB since the last [`reset_peak`] (Linux: VmHWM).
fn peak_rss_mb() -> Option<f64> {
    let s = std::fs::read_to_string("/proc/self/status").ok()?;
    let kb: f64 = s.lines().find(|l| l.starts_with("VmHWM:"))?.split_whitespace().nth(1)?.parse().ok()?;
    Some(kb / 1024.0)
}

/// Resets the peak resident memory to the current one (Linux ≥ 4.0: "5" to clear_refs).
fn reset_peak() -> bool {
    std::fs::write("/proc/self/clear_refs", "5").is_ok()
}

fn time_reading(model: &Model, x: &ArrayD<f32>, req: &Request, repeats: usize) -> Result<(Vec<f64>, Reading)> {
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

/// The fastest of the peer's runs in `list` (by median), with a label of its setting.
fn fastest(list: &Value, label: impl Fn(&Value) -> String) -> Option<(f64, String, &Value)> {
    list.as_array()?
        .iter()
        .filter_map(|r| Some((r["median"].as_f64()?, label(r), r)))
        .min_by(|a, b| a.0.total_cmp(&b.0))
}

fn torch_setting(r: &Value) -> String {
    format!(
        "PyTorch, batch {}, {}, {} threads",
        r["batch"],
        if r["channels_last"].as_bool() == Some(true) { "channels-last" } else { "NCHW" },
        r["threads"]
    )
}

fn main() -> Result<()> {
    // `cargo bench` passes --bench; nothing else is taken.
    let repeats = env_usize("SPURION_BENCH_REPEATS", 3)?.max(1);
    let cores = std::thread::available_parallelism().map(|n| n.get()).unwrap_or(1);
    let threads = env_usize("SPURION_BENCH_THREADS", cores)?.max(1);
    let tasks = std::env::var("SPURION_BENCH_TASKS").unwrap_or_else(|_| "ig,occlusion,refine,saturating,vit,cli".into());
    let task = |t: &str| tasks.split(',').any(|s| s.trim() == t);
    let with_peers = std::env::var("SPURION_BENCH_PEERS").map_or(true, |v| v != "0");
    rayon::ThreadPoolBuilder::new().num_threads(threads).build_global()?;
    // The bench binary sits in TARGET/release/deps/: its files go to TARGET/bench-speed.
    let exe = std::env::current_exe()?;
    let target_dir = exe.ancestors().nth(3).map(Path::to_path_buf).context("bench binary location")?;
    let dir = target_dir.join("bench-speed");
    std::fs::create_dir_all(&dir)?;
    let py = std::env::var_os("SPURION_BENCH_PYTHON").map(PathBuf::from);
    if with_peers && py.is_none() {
        eprintln!(
            "speed bench skipped: set SPURION_BENCH_PYTHON to a Python with torch, torchvision \
             and onnxruntime (see DEVELOPERS.md, 'Benchmarks')"
        );
        return Ok(());
    }
    let resnet = task("ig") || task("occlusion") || task("refine") || task("cli");
    let peer = match &py {
        Some(py) if with_peers && resnet => run_peer(py, &dir, threads, repeats, &[])?,
        _ => {
            if !with_peers {
                eprintln!("SPURION_BENCH_PEERS=0: spurion only, on the files in {}", dir.display());
            }
            Value::Null
        }
    };
    // (workload, spurion seconds, peer seconds, peer setting, target ratio)
    let mut rows: Vec<(String, f64, f64, String, Option<f64>)> = vec![];
    let mut notes: Vec<String> = vec![];
    let mut disagree = vec![];
    if task("vit") {
        vit_task(py.as_deref().filter(|_| with_peers), &dir, threads, repeats, &mut rows, &mut notes, &mut disagree)?;
    }
    if resnet {
        resnet_tasks(&peer, &dir, threads, repeats, &task, with_peers, &mut rows, &mut notes, &mut disagree)?;
    }
    println!();
    println!(
        "ResNet-18 and ViT-B/16 (random weights), 1×3×224×224, {threads} threads, {repeats} repeats (medians); torch {}, onnxruntime {}",
        peer["torch"].as_str().unwrap_or("see the notes"),
        peer["onnxruntime"].as_str().unwrap_or("?")
    );
    println!("{:<32} {:>10} {:>10} {:>7} {:>7}  peer at its best", "workload", "spurion s", "peer s", "ratio", "target");
    for (work, ours, theirs, setting, goal) in &rows {
        let goal = goal.map_or("-".to_string(), |g| format!("≤{g:.1}×"));
        println!("{work:<32} {ours:>10.2} {theirs:>10.2} {:>6.2}× {goal:>7}  {setting}", ours / theirs);
    }
    for n in &notes {
        println!("  {n}");
    }
    if !disagree.is_empty() {
        bail!("spurion and the peer disagree on {}; the timings compare different work", disagree.join(" and "));
    }
    Ok(())
}

type Rows = Vec<(String, f64, f64, String, Option<f64>)>;

/// Integrated gradients, 64 midpoint steps, on ViT-B/16 (issue 24), with both peak memories.
fn vit_task(py: Option<&Path>, dir: &Path, threads: usize, repeats: usize, rows: &mut Rows, notes: &mut Vec<String>, disagree: &mut Vec<&'static str>) -> Result<()> {
    let peer = match py {
        Some(py) => run_peer(py, dir, threads, repeats, &["vit"])?,
        None => Value::Null,
    };
    let reset = reset_peak();
    let model = Model::load(&dir.join("vit_b_16.onnx"), &LoadOptions::default())
        .context("the ViT bench model (run once with the peers to export it)")?;
    let x: ArrayD<f32> = spurion::feed::read_tensor(&dir.join("vit-x.npy"))?;
    let target = peer["target"].as_u64().map_or(TargetSpec::Top, |t| TargetSpec::Index(t as usize));
    let req = Request {
        method: Method::IntegratedGradients { steps: 64, rule: Rule::Midpoint, adaptive: None },
        baseline: Baseline::Black,
        target,
        score: ScoreKind::Raw,
    };
    eprintln!("spurion: ViT-B/16 integrated gradients, 64 steps ...");
    let (times, r) = time_reading(&model, &x, &req, repeats)?;
    let ours_peak = peak_rss_mb().filter(|_| reset);
    let (peer_s, setting, best) = fastest(&peer["ig"], torch_setting).unwrap_or((f64::NAN, "-".into(), &Value::Null));
    if let Some(sum) = best["sum"].as_f64() {
        let err = (r.attribution_sum - sum).abs() / sum.abs().max(1e-6);
        notes.push(format!("ViT IG attribution sum: spurion {:.5}, PyTorch {sum:.5} (rel. difference {err:.1e})", r.attribution_sum));
        if err > 1e-3 {
            disagree.push("ViT integrated gradients");
        }
    }
    if let Some(list) = peer["ig"].as_array() {
        let all: Vec<String> = list.iter().map(|r| format!("{}: {:.2} s", torch_setting(r), r["median"].as_f64().unwrap_or(f64::NAN))).collect();
        notes.push(format!("PyTorch ViT IG settings: {}", all.join("; ")));
    }
    let peer_peak = match (py, best["batch"].as_u64()) {
        (Some(py), Some(batch)) => {
            let cl = if best["channels_last"].as_bool() == Some(true) { "1" } else { "0" };
            run_peer(py, dir, threads, 1, &["vit-peak", &batch.to_string(), cl])?["peak_rss_mb"].as_f64()
        }
        _ => None,
    };
    let mb = |v: Option<f64>| v.map_or("?".to_string(), |v| format!("{v:.0} MB"));
    notes.push(format!(
        "ViT peak resident memory: spurion {} (this process from before loading the model), PyTorch {} (a fresh process at its best setting, torch included)",
        mb(ours_peak),
        mb(peer_peak)
    ));
    notes.push(format!("spurion ViT IG times (s): {times:.2?}"));
    rows.push(("ViT-B/16 IG, 64 steps".into(), median(&times), peer_s, setting, Some(1.0)));
    Ok(())
}

/// The ResNet-18 tasks: integrated gradients, occlusion, the time to a 1 % gap.
#[allow(clippy::too_many_arguments)]
fn resnet_tasks(
    peer: &Value,
    dir: &Path,
    _threads: usize,
    repeats: usize,
    task: &dyn Fn(&str) -> bool,
    with_peers: bool,
    rows: &mut Rows,
    notes: &mut Vec<String>,
    disagree: &mut Vec<&'static str>,
) -> Result<()> {
    let model = Model::load(&dir.join("resnet18.onnx"), &LoadOptions::default())
        .context("the bench model (run once with the peers to export it)")?;
    let x: ArrayD<f32> = spurion::feed::read_tensor(&dir.join("x.npy"))?;
    // The peer's class (its top class at x); spurion's own top class without the peer.
    let target = peer["target"].as_u64().map_or(TargetSpec::Top, |t| TargetSpec::Index(t as usize));
    let base = Request {
        method: Method::IntegratedGradients { steps: 64, rule: Rule::Midpoint, adaptive: None },
        baseline: Baseline::Black,
        target,
        score: ScoreKind::Raw,
    };
    if task("ig") {
        eprintln!("spurion: integrated gradients, 64 steps ...");
        let (times, r) = time_reading(&model, &x, &base, repeats)?;
        let (peer_s, setting, best) = fastest(&peer["ig"], torch_setting).unwrap_or((f64::NAN, "-".into(), &Value::Null));
        if let Some(sum) = best["sum"].as_f64() {
            let err = (r.attribution_sum - sum).abs() / sum.abs().max(1e-6);
            notes.push(format!("IG attribution sum: spurion {:.5}, PyTorch {sum:.5} (rel. difference {err:.1e})", r.attribution_sum));
            if err > 1e-3 {
                disagree.push("integrated gradients");
            }
        }
        if let Some(list) = peer["ig"].as_array() {
            let all: Vec<String> = list.iter().map(|r| format!("{}: {:.2} s", torch_setting(r), r["median"].as_f64().unwrap_or(f64::NAN))).collect();
            notes.push(format!("PyTorch IG settings: {}", all.join("; ")));
        }
        notes.push(format!("spurion IG times (s): {times:.2?}"));
        rows.push(("integrated gradients, 64 steps".into(), median(&times), peer_s, setting, Some(1.0)));
    }

    if task("occlusion") {
        let occ = Request { method: Method::Occlusion { window: 16, stride: 8 }, ..base.clone() };
        eprintln!("spurion: occlusion, window 16, stride 8 ...");
        let (times, r) = time_reading(&model, &x, &occ, repeats)?;
        let ort_setting = |r: &Value| format!("onnxruntime, batch {}, {} intra-op threads", r["batch"], r["threads"]);
        let (peer_s, setting, _) = fastest(&peer["occlusion"], ort_setting).unwrap_or((f64::NAN, "-".into(), &Value::Null));
        if with_peers {
            let ort_map: ArrayD<f32> = spurion::feed::read_tensor(&dir.join("occlusion-ort.npy"))?;
            let ours = r.map2d();
            let scale = ort_map.iter().fold(1e-6f32, |m, v| m.max(v.abs()));
            let err = ours.iter().zip(ort_map.iter()).fold(0f32, |m, (a, b)| m.max((a - b).abs())) / scale;
            notes.push(format!("occlusion map: max difference to onnxruntime's {err:.1e} of its largest value"));
            if err > 1e-3 {
                disagree.push("occlusion");
            }
        }
        if let Some(list) = peer["occlusion"].as_array() {
            let all: Vec<String> = list.iter().map(|r| format!("{}: {:.2} s", ort_setting(r), r["median"].as_f64().unwrap_or(f64::NAN))).collect();
            notes.push(format!("onnxruntime occlusion settings: {}", all.join("; ")));
        }
        notes.push(format!("spurion occlusion times (s): {times:.2?}"));
        rows.push(("occlusion, window 16 stride 8".into(), median(&times), peer_s, setting, Some(0.8)));
    }

    if task("refine") {
        let req = Request { method: Method::integrated_gradients(), ..base.clone() };
        eprintln!("spurion: integrated gradients refined to a 1 % gap ...");
        let (times, r) = time_reading(&model, &x, &req, repeats)?;
        let c = r.completeness.clone().context("a refined reading reports its completeness")?;
        // How far the refined maps are from a fine rule's, pixel by pixel (the gap checks only
        // the total): 128 midpoint steps as the reference, computed once, not timed.
        let fine_req = Request { method: Method::IntegratedGradients { steps: 128, rule: Rule::Midpoint, adaptive: None }, ..base.clone() };
        let fine = explain(&model, None, &Input::tensor(x.clone(), "x.npy"), &fine_req, &Control::new())?;
        let l1 = |m: &ArrayD<f32>| {
            let num: f64 = m.iter().zip(fine.map.iter()).map(|(a, b)| (a - b).abs() as f64).sum();
            num / fine.map.iter().map(|v| v.abs() as f64).sum::<f64>()
        };
        notes.push(format!(
            "spurion to 1 %: {} gradients and {} forwards, gap {:.3} %, target {}, map {:.1} % (L1) from 128 midpoint steps' (times {times:.2?} s)",
            c.steps,
            c.forwards,
            100.0 * c.gap.unwrap_or(f64::NAN),
            if c.reached == Some(true) { "reached" } else { "NOT reached" },
            100.0 * l1(&r.map)
        ));
        // The same refinement from 4 cells (`--steps 4 --adaptive`): what a start small enough to
        // win this row would cost in the map.
        let small = Request { method: Method::IntegratedGradients { steps: 4, rule: Rule::Midpoint, adaptive: Some(0.01) }, ..base.clone() };
        let (small_times, rs) = time_reading(&model, &x, &small, repeats)?;
        let cs = rs.completeness.clone().context("a refined reading reports its completeness")?;
        notes.push(format!(
            "spurion to 1 % from 4 cells: {} gradients, gap {:.3} %, map {:.1} % (L1) from 128 steps', median {:.2} s",
            cs.steps,
            100.0 * cs.gap.unwrap_or(f64::NAN),
            100.0 * l1(&rs.map),
            median(&small_times)
        ));
        let refine = &peer["refine"];
        if let Some(run) = refine["runs"].as_array().and_then(|r| r.first()).and_then(|r| r.as_array()) {
            let levels: Vec<String> = run
                .iter()
                .map(|l| format!("{} steps gap {:.3} % {:.2} s", l["steps"], 100.0 * l["gap"].as_f64().unwrap_or(f64::NAN), l["seconds"].as_f64().unwrap_or(f64::NAN)))
                .collect();
            notes.push(format!("PyTorch to 1 % (first run): {}", levels.join(", ")));
        }
        let setting = if refine.is_null() { "-".to_string() } else { format!("{} (8, 16, 32, … steps)", torch_setting(refine)) };
        rows.push(("time to a 1 % completeness gap".into(), median(&times), refine["median"].as_f64().unwrap_or(f64::NAN), setting.clone(), Some(0.6)));
        rows.push(("  the same from 4 cells".into(), median(&small_times), refine["median"].as_f64().unwrap_or(f64::NAN), setting, None));
    }

    if task("cli") {
        cli_task(peer, dir, repeats, with_peers, rows, notes, disagree)?;
    }
    if task("saturating") {
        notes.push(saturating_counts()?);
    }
    Ok(())
}

/// One reading as a user runs it, set-up included: `spurion explain` as a fresh process (model
/// loading, plan building, files written) against a fresh Python process that imports torch,
/// builds the network and computes the same integrated gradients at the peer's best setting.
/// Also one default reading of the demo (sample model, every setting at its default), no peer.
fn cli_task(peer: &Value, dir: &Path, repeats: usize, with_peers: bool, rows: &mut Rows, notes: &mut Vec<String>, disagree: &mut Vec<&'static str>) -> Result<()> {
    let exe = Path::new(env!("CARGO_BIN_EXE_spurion"));
    let threads = rayon::current_num_threads().to_string();
    let run = |args: &[&str], out: &Path| -> Result<f64> {
        let _ = std::fs::remove_dir_all(out);
        let t0 = Instant::now();
        let o = Command::new(exe).args(args).arg("--out").arg(out).arg("-q").env("RAYON_NUM_THREADS", &threads).output()?;
        let s = t0.elapsed().as_secs_f64();
        if !o.status.success() {
            bail!("spurion explain failed: {}", String::from_utf8_lossy(&o.stderr));
        }
        Ok(s)
    };
    let target = peer["target"].as_u64().map(|t| t.to_string()).unwrap_or_else(|| "top".into());
    let model = dir.join("resnet18.onnx");
    let x = dir.join("x.npy");
    let args = [
        "explain", "--model", model.to_str().context("path")?, "--tensor", x.to_str().context("path")?, "--baseline", "black", "--steps", "64",
        "--rule", "midpoint", "--score", "raw", "--target", &target,
    ];
    eprintln!("spurion: one CLI reading (integrated gradients, 64 steps), set-up included ...");
    let out = dir.join("cli-reading");
    let times: Vec<f64> = (0..repeats).map(|_| run(&args, &out)).collect::<Result<_>>()?;
    let ours: ArrayD<f32> = spurion::feed::read_tensor(&out.join("map.npy"))?;
    let ours_sum: f64 = ours.iter().map(|v| *v as f64).sum();
    let py = std::env::var_os("SPURION_BENCH_PYTHON").map(PathBuf::from).filter(|_| with_peers);
    let best = fastest(&peer["ig"], torch_setting);
    let (peer_s, setting) = match (py, best) {
        (Some(py), Some((_, setting, b))) => {
            let batch = b["batch"].as_u64().context("the peer's batch")?.to_string();
            let cl = if b["channels_last"].as_bool() == Some(true) { "1" } else { "0" };
            let threads = b["threads"].as_u64().context("the peer's threads")? as usize;
            let mut ts = vec![];
            let mut sum = f64::NAN;
            for _ in 0..repeats {
                let t0 = Instant::now();
                let v = run_peer(&py, dir, threads, 1, &["user", &batch, cl])?;
                ts.push(t0.elapsed().as_secs_f64());
                sum = v["sum"].as_f64().unwrap_or(f64::NAN);
            }
            let err = (ours_sum - sum).abs() / sum.abs().max(1e-6);
            notes.push(format!("CLI reading's attribution sum: spurion {ours_sum:.5}, PyTorch {sum:.5} (rel. difference {err:.1e}); PyTorch process times (s): {ts:.2?}"));
            if !(err <= 1e-3) {
                disagree.push("the CLI reading");
            }
            (median(&ts), format!("{setting}, a fresh Python process"))
        }
        _ => (f64::NAN, "-".to_string()),
    };
    notes.push(format!("spurion CLI reading times (s): {times:.2?}"));
    rows.push(("one CLI reading, set-up included".into(), median(&times), peer_s, setting, Some(1.0)));
    // The demo as a user first runs it: the sample model and a Hillmoor image, all defaults.
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let (m, i) = (root.join("sample-models/shortcut.onnx"), root.join("assets/demo/0002-hillmoor.png"));
    let demo = ["explain", "--model", m.to_str().context("path")?, "--image", i.to_str().context("path")?];
    let out = dir.join("cli-default");
    let times: Vec<f64> = (0..repeats).map(|_| run(&demo, &out)).collect::<Result<_>>()?;
    notes.push(format!("one default reading of the demo (sample model, Hillmoor image, every setting at its default, set-up and files included): median {:.2} s, times {times:.2?}", median(&times)));
    Ok(())
}

/// Gradients to a 1 % gap on the saturating fixture: the default refinement against the best
/// uniform rule (counts, not times: they are exact and do not depend on the machine).
fn saturating_counts() -> Result<String> {
    let fixtures = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fixtures/methods");
    let model = Model::load(&fixtures.join("saturating.onnx"), &LoadOptions::default())?;
    let x: ArrayD<f32> = spurion::feed::read_tensor(&fixtures.join("saturating.x.npy"))?;
    let input = Input::tensor(x, "saturating.x.npy");
    let req = |method: Method| Request { method, baseline: Baseline::Black, target: TargetSpec::Index(1), score: ScoreKind::Raw };
    let r = explain(&model, None, &input, &req(Method::integrated_gradients()), &Control::new())?;
    let c = r.completeness.context("a refined reading reports its completeness")?;
    let mut best: Option<(usize, Rule)> = None;
    for rule in [Rule::Midpoint, Rule::Trapezoid, Rule::GaussLegendre] {
        let mut n = 4;
        while n <= 4096 && best.is_none_or(|(b, _)| rule.nodes(n).len() < b) {
            let u = explain(&model, None, &input, &req(Method::IntegratedGradients { steps: n, rule, adaptive: None }), &Control::new())?;
            if u.completeness_gap.is_some_and(|g| g <= 0.01) {
                best = Some((rule.nodes(n).len(), rule));
                break;
            }
            n *= 2;
        }
    }
    let uniform = best.map_or("no uniform rule within 4096 points".to_string(), |(n, rule)| {
        format!("best uniform rule {} at {n} gradients: {:.3} of it (target ≤ 0.1)", rule.name(), c.steps as f64 / n as f64)
    });
    Ok(format!(
        "saturating model (softmax output, black baseline): refined {} gradients + {} forwards to a {:.3} % gap ({}); {uniform}",
        c.steps,
        c.forwards,
        100.0 * c.gap.unwrap_or(f64::NAN),
        if c.reached == Some(true) { "target reached" } else { "target NOT reached" }
    ))
}
