//! Issue 26's command-line stumbles, each as a user meets it: file modes, a second run without
//! `--out`, a tiny picture, an empty folder, a ledger change on a missing image, and a sweep of
//! the bundled demo.

use std::path::Path;
use std::process::{Command, Output};

use crate::common::root;

fn spurion_in(dir: &Path, umask: &str, args: &[&str]) -> Output {
    // Through the shell, so that the umask is the one a user's terminal would have.
    let mut script = format!("umask {umask}; exec \"$0\"");
    for i in 1..=args.len() {
        script.push_str(&format!(" \"${{{i}}}\""));
    }
    Command::new("sh").arg("-c").arg(script).arg(env!("CARGO_BIN_EXE_spurion")).args(args).current_dir(dir).output().expect("run spurion")
}

fn ok(o: &Output) -> String {
    assert!(o.status.success(), "{}\n{}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr));
    String::from_utf8_lossy(&o.stderr).into_owned()
}

fn mode(p: &Path) -> u32 {
    use std::os::unix::fs::PermissionsExt;
    std::fs::metadata(p).unwrap().permissions().mode() & 0o777
}

fn demo(name: &str) -> String {
    root().join("assets/demo").join(name).to_string_lossy().into_owned()
}

fn model() -> String {
    root().join("sample-models/shortcut.onnx").to_string_lossy().into_owned()
}

#[test]
fn sweep_and_explain_files_follow_the_umask_alike() {
    let dir = tempfile::tempdir().unwrap();
    let images = dir.path().join("images");
    std::fs::create_dir_all(&images).unwrap();
    std::fs::copy(demo("0005-hillmoor.png"), images.join("a.png")).unwrap();
    for (umask, want) in [("022", 0o644), ("077", 0o600), ("002", 0o664)] {
        let out = dir.path().join(format!("sweep-{umask}"));
        let o = spurion_in(dir.path(), umask, &["sweep", "--model", &model(), "--images", "images", "--out", out.to_str().unwrap(), "--method", "gradient", "--quiet"]);
        ok(&o);
        for f in ["sweep.csv", "sweep.jsonl", "groups.json", "report.html", "run.json"] {
            assert_eq!(mode(&out.join(f)), want, "{f} under umask {umask}");
        }
        let cached: Vec<_> = walk(&out.join("cache"));
        assert!(!cached.is_empty());
        assert!(cached.iter().all(|p| mode(p) == want), "the cache's files under umask {umask}");
        let reading = dir.path().join(format!("reading-{umask}"));
        ok(&spurion_in(dir.path(), umask, &["explain", "--model", &model(), "--image", "images/a.png", "--method", "gradient", "--out", reading.to_str().unwrap(), "-q"]));
        assert_eq!(mode(&reading.join("reading.json")), want, "explain's reading.json under umask {umask}");
    }
}

fn walk(d: &Path) -> Vec<std::path::PathBuf> {
    let mut out = vec![];
    for e in std::fs::read_dir(d).unwrap().flatten() {
        if e.path().is_dir() {
            out.extend(walk(&e.path()));
        } else {
            out.push(e.path());
        }
    }
    out
}

#[test]
fn a_second_explain_without_out_keeps_the_first() {
    let dir = tempfile::tempdir().unwrap();
    let args = ["explain", "--model", &model(), "--image", &demo("0005-hillmoor.png"), "--method", "gradient", "-q"];
    let first = ok(&spurion_in(dir.path(), "022", &args));
    assert!(!first.contains("already holds"), "{first}");
    let a = dir.path().join("reading-0005-hillmoor-gradient");
    std::fs::write(a.join("mine.txt"), "kept").unwrap();
    let second = ok(&spurion_in(dir.path(), "022", &args));
    assert!(second.contains("already holds an earlier result") && second.contains("reading-0005-hillmoor-gradient-2"), "{second}");
    assert_eq!(std::fs::read_to_string(a.join("mine.txt")).unwrap(), "kept");
    assert!(dir.path().join("reading-0005-hillmoor-gradient-2/reading.json").is_file());
    ok(&spurion_in(dir.path(), "022", &args));
    assert!(dir.path().join("reading-0005-hillmoor-gradient-3/reading.json").is_file());
}

#[test]
fn a_one_pixel_png_is_warned_of() {
    let dir = tempfile::tempdir().unwrap();
    image::GrayImage::from_pixel(1, 1, image::Luma([128])).save(dir.path().join("dot.png")).unwrap();
    let o = spurion_in(dir.path(), "022", &["predict", "--model", &model(), "--image", "dot.png"]);
    let err = ok(&o);
    assert!(err.contains("warning: dot.png") && err.contains("only 1×1 pixels") && err.contains("128×128"), "{err}");
    // A picture of the model's size says nothing.
    let o = spurion_in(dir.path(), "022", &["predict", "--model", &model(), "--image", &demo("0005-hillmoor.png")]);
    assert!(!ok(&o).contains("warning"));
}

#[test]
fn an_empty_folder_sweep_says_so() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir_all(dir.path().join("empty")).unwrap();
    let o = spurion_in(dir.path(), "022", &["sweep", "--model", &model(), "--images", "empty", "--out", "out", "--quiet"]);
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("empty") && err.contains("holds no image"), "{err}");
    assert!(!dir.path().join("out/sweep.csv").exists(), "no empty report");
}

#[test]
fn ledger_set_on_a_missing_image_says_it_does_not_exist() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(demo("0005-hillmoor.png"), dir.path().join("a.png")).unwrap();
    let o = spurion_in(dir.path(), "022", &["ledger", "set", "--ledger", ".", "--image", "nothere.png", "--verdict", "marked"]);
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("nothere.png not found: it does not exist") && !err.contains("not inside"), "{err}");
    // Outside the root and missing: still "does not exist", the first thing to fix.
    let o = spurion_in(dir.path(), "022", &["ledger", "set", "--ledger", ".", "--image", "/nowhere/b.png", "--verdict", "marked"]);
    assert!(String::from_utf8_lossy(&o.stderr).contains("does not exist"));
    ok(&spurion_in(dir.path(), "022", &["ledger", "set", "--ledger", ".", "--image", "a.png", "--verdict", "marked"]));
}

#[test]
fn the_bundled_demo_sweeps_each_image_once_in_readable_groups() {
    let dir = tempfile::tempdir().unwrap();
    let demo_dir = root().join("assets/demo");
    let manifest = format!("{}:site", demo_dir.join("manifest.csv").display());
    let m = model();
    let run = |extra: &[&str], out: &str| {
        let mut args = vec!["sweep", "--model", &m, "--images", demo_dir.to_str().unwrap(), "--exclude", "masks", "--out", out, "--method", "gradient", "--quiet"];
        args.extend_from_slice(extra);
        let owned: Vec<String> = args.iter().map(|s| s.to_string()).collect();
        let refs: Vec<&str> = owned.iter().map(String::as_str).collect();
        ok(&spurion_in(dir.path(), "022", &refs));
        let rows: Vec<serde_json::Value> =
            std::fs::read_to_string(dir.path().join(out).join("sweep.jsonl")).unwrap().lines().map(|l| serde_json::from_str(l).unwrap()).collect();
        rows
    };
    // Folders: the 44 PNGs once each, in one group with a name a person reads.
    let rows = run(&[], "by-folder");
    assert_eq!(rows.len(), 44, "each demo image once, no DICOM copy beside it");
    assert!(rows.iter().all(|r| r["group"] == "(top folder)"), "{:?}", rows[0]["group"]);
    // By the manifest's site: the three founding sites, 12 images each, and Fellbrook's 8.
    let rows = run(&["--groups", &manifest], "by-site");
    for (site, n) in [("north-quay", 12), ("saltmarsh", 12), ("hillmoor", 12), ("fellbrook", 8)] {
        assert_eq!(rows.iter().filter(|r| r["group"] == site).count(), n, "{site}");
    }
}
