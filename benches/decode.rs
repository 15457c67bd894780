//! DICOM decoding speed against pydicom's, measured in one run on this machine: reading a file
//! and windowing it (spurion's `Picture::open`: read_dicom, the Modality LUT, the file's window)
//! against pydicom's dcmread + pixel_array + apply_modality_lut + apply_voi_lut. Best of N runs
//! each (the machine is shared); asserts nothing about time.
//!
//!   SPURION_BENCH_PYTHON=.venv/bin/python cargo bench --bench decode
//!
//! Files: a 512×512 16-bit file written by the demo writer, and pydicom's bundled CT_small.dcm.
//! SPURION_BENCH_REPEATS sets N (default 30).

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use anyhow::{Context, Result, bail};
use ndarray::Array2;
use spurion::demo::Site;
use spurion::demo::dicom::{DemoDicomMeta, write_demo_dicom};
use spurion::feed::Picture;

fn best_of(n: usize, path: &Path) -> Result<f64> {
    let mut best = f64::INFINITY;
    for _ in 0..n {
        let start = Instant::now();
        std::hint::black_box(Picture::open(path)?);
        best = best.min(start.elapsed().as_secs_f64());
    }
    Ok(best)
}

fn python(py: &Path, args: &[&str]) -> Result<String> {
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/pydicom_lut.py");
    let out = Command::new(py).arg(&script).args(args).output().with_context(|| format!("starting {}", py.display()))?;
    if !out.status.success() {
        bail!("{} {args:?} failed:\n{}", script.display(), String::from_utf8_lossy(&out.stderr));
    }
    Ok(String::from_utf8_lossy(&out.stdout).trim().to_string())
}

fn main() -> Result<()> {
    let py = PathBuf::from(std::env::var("SPURION_BENCH_PYTHON").context("set SPURION_BENCH_PYTHON to a Python with pydicom and numpy")?);
    let n: usize = std::env::var("SPURION_BENCH_REPEATS").ok().map(|v| v.parse()).transpose()?.unwrap_or(30);
    let dir = tempfile::tempdir()?;
    let demo = dir.path().join("demo_512.dcm");
    let gray = Array2::from_shape_fn((512, 512), |(r, c)| ((r * 97 + c * 61) % 65536) as u16);
    let meta = DemoDicomMeta {
        number: 5,
        instance: 1,
        site: Site::NorthQuay,
        modality: "DX".into(),
        rescale_slope: 1.0,
        rescale_intercept: 0.0,
        window_center: 32768.0,
        window_width: 40000.0,
        burned_in_annotation: false,
    };
    write_demo_dicom(&demo, &gray, 16, &meta)?;
    let ct = PathBuf::from(python(&py, &["testdir"])?).join("CT_small.dcm");
    println!("{:<28} {:>12} {:>12} {:>8}", "file", "spurion ms", "pydicom ms", "ratio");
    for (name, path) in [("512×512 16-bit (demo writer)", &demo), ("CT_small.dcm (pydicom)", &ct)] {
        let ours = best_of(n, path)? * 1e3;
        let theirs: f64 = python(&py, &["speed", path.to_str().unwrap(), &n.to_string()])?
            // It prints "PATH\tT ms".
            .split_whitespace()
            .rev()
            .nth(1)
            .and_then(|t| t.parse().ok())
            .context("reading the peer's time")?;
        println!("{name:<28} {ours:>12.3} {theirs:>12.3} {:>7.2}×", ours / theirs);
    }
    Ok(())
}
