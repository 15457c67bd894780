//! Shared helpers for integration tests: finding the reference Python and running it.

use std::path::{Path, PathBuf};
use std::process::Command;

/// The manifest directory (repository root).
pub fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

pub fn fixture(rel: &str) -> PathBuf {
    root().join("tests").join("fixtures").join(rel)
}

/// Whether a missing reference is a failure rather than a skip: SPURION_REQUIRE_REFERENCES=1,
/// which `.ci/run` sets, so reference checks cannot silently vanish there.
pub fn references_required() -> bool {
    std::env::var("SPURION_REQUIRE_REFERENCES").is_ok_and(|v| v == "1")
}

/// The Python with the reference libraries: $SPURION_PYTHON, else ./.venv/bin/python.
/// Returns None when neither exists (the caller then skips, saying why), unless
/// [`references_required`], when it fails.
pub fn reference_python() -> Option<PathBuf> {
    let p = std::env::var_os("SPURION_PYTHON").map(PathBuf::from).unwrap_or_else(|| root().join(".venv/bin/python"));
    if p.exists() {
        return Some(p);
    }
    if references_required() {
        panic!("reference Python not found at {} and SPURION_REQUIRE_REFERENCES=1; .ci/run makes it", p.display());
    }
    eprintln!("SKIPPED: no reference Python at {} (run .ci/run once to make .venv)", p.display());
    None
}

/// Runs a reference script; panics with its stderr if it fails.
pub fn run_python(py: &Path, script: &str, args: &[&str]) -> String {
    let out = Command::new(py)
        .arg(root().join("tests/reference").join(script))
        .args(args)
        .output()
        .expect("start reference python");
    if !out.status.success() {
        panic!("{script} failed:\n{}", String::from_utf8_lossy(&out.stderr));
    }
    String::from_utf8_lossy(&out.stdout).into_owned()
}

/// max |a − b| / max(max |b|, floor)
pub fn rel_err(a: &[f32], b: &[f32], floor: f32) -> f32 {
    assert_eq!(a.len(), b.len(), "length mismatch");
    let scale = b.iter().fold(floor, |m, v| m.max(v.abs()));
    a.iter().zip(b).fold(0.0f32, |m, (x, y)| m.max((x - y).abs())) / scale
}

/// The committed clean photographs in tests/fixtures/regions (open images: scikit-image's data and
/// pydicom's test files; `SOURCES.txt` there names each), none of which carries a mark.
pub const CLEAN_PHOTOS: &[&str] = &[
    "skimage-camera.png",
    "skimage-astronaut.png",
    "skimage-coins.png",
    "skimage-moon.png",
    "skimage-brick.png",
    "skimage-grass.png",
    "skimage-gravel.png",
    "skimage-shepp_logan_phantom.png",
    "skimage-chelsea.png",
    "skimage-coffee.png",
    "skimage-rgb-astronaut.png",
    "skimage-rgb-chelsea.png",
    "skimage-rgb-coffee.png",
    "skimage-rgb-retina.png",
    "skimage-rgb-immunohistochemistry.png",
    "skimage-rgb-hubble_deep_field.png",
    "pydicom-ct-small.png",
    "pydicom-mr-small.png",
];

/// The grey ones of [`CLEAN_PHOTOS`] (the RGB copies left out).
pub fn clean_grey_photos() -> impl Iterator<Item = &'static str> {
    CLEAN_PHOTOS.iter().copied().filter(|f| !f.starts_with("skimage-rgb-"))
}
