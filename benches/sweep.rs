//! Sweep throughput: images per second over a generated demo folder at the default settings
//! (the same request `spurion sweep` makes with no flags), on 1 thread and on 2, and how it
//! scales. There is no peer to compare with; the figures go in the notes, not in a timed test.
//!
//!   cargo bench --bench sweep
//!
//! SPURION_BENCH_SWEEP_IMAGES sets the folder's size (default 1000), SPURION_BENCH_THREADS the
//! thread counts to try (default "1,2"). Each run starts from an empty cache.

use std::path::Path;
use std::time::Instant;

use anyhow::Result;
use spurion::control::Control;
use spurion::demo::{Mix, SetSpec, write_demo_set};
use spurion::feed::{FeedCard, OpenOptions};
use spurion::methods::Request;
use spurion::model::{LoadOptions, Model};
use spurion::sweep::{self, Cache, Exclude, Groups, Setup, Shard};

fn main() -> Result<()> {
    let n: usize = std::env::var("SPURION_BENCH_SWEEP_IMAGES").ok().and_then(|v| v.parse().ok()).unwrap_or(1000);
    let threads: Vec<usize> = std::env::var("SPURION_BENCH_THREADS")
        .unwrap_or_else(|_| "1,2".into())
        .split(',')
        .filter_map(|t| t.trim().parse().ok())
        .collect();
    let dir = tempfile::tempdir()?;
    let demo = dir.path().join("demo");
    let spec = SetSpec { count: n, seed: 2026, mix: Mix::Pooled, by_site: true, masks: false, ..SetSpec::default() };
    write_demo_set(&demo, &spec, &Control::new())?;
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let model_path = root.join("sample-models/shortcut.onnx");
    let model = Model::load(&model_path, &LoadOptions::default())?;
    let card = FeedCard::for_loaded(&model)?;
    let request = Request::default();
    let items = sweep::plan(&demo.join("images"), &Groups::Folders, &Exclude::default(), Shard::ALL)?;
    println!("sweep throughput: {} images (pooled demo mix, 256²), shortcut model, default settings ({})", items.len(), request.describe());
    let mut first = None;
    for t in threads {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(t).build()?;
        let cache = Cache::open(&dir.path().join(format!("cache-{t}")))?;
        let setup = Setup {
            model: &model,
            card: &card,
            request: &request,
            open: OpenOptions { frame: 0, window: card.input.window.clone() },
            finder: Default::default(),
            flag: Default::default(),
            drawn: Default::default(),
        };
        let start = Instant::now();
        let result = pool.install(|| sweep::run_shard(&setup, &items, &cache, Shard::ALL, demo.join("images"), &Control::new()))?;
        let s = start.elapsed().as_secs_f64();
        let rate = result.rows.len() as f64 / s;
        let steps: usize = result.rows.iter().filter_map(|r| r.steps).sum();
        let scale = first.map(|f: f64| format!(", {:.2}× the 1-thread rate", rate / f)).unwrap_or_default();
        first.get_or_insert(rate);
        println!(
            "  {t} thread(s): {:.1} s, {:.2} images/s ({} read, {} skipped; {:.0} integrated-gradients steps an image on average){scale}",
            s,
            rate,
            result.rows.len(),
            result.skipped.len(),
            steps as f64 / result.rows.len().max(1) as f64
        );
    }
    Ok(())
}
