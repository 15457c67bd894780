//! `spurion sweep` as a curator runs it: resumable after a kill, shards that merge into the
//! unsharded result (by hand and as a real Slurm job array), a report that a browser opens with
//! no network, and the atlas showing where the shortcut model looks across a site's images.
//!
//! The mechanics are checked with the gradient method (one pass an image, so the tests stay
//! small); the atlas with integrated gradients.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::sync::OnceLock;
use std::time::{Duration, Instant};

use spurion::control::Control;
use spurion::demo::{Marks, Mix, SetSpec, write_demo_set};

use crate::common::{references_required, root};

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().expect("run spurion")
}

fn ok(o: &Output) {
    assert!(o.status.success(), "exit {:?}\nstdout: {}\nstderr: {}", o.status, String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr));
}

fn model(name: &str) -> String {
    root().join("sample-models").join(format!("{name}.onnx")).display().to_string()
}

/// A demo folder by site (4 images a site), made once for every test here.
struct Fixture {
    _dir: tempfile::TempDir,
    demo: PathBuf,
    images: PathBuf,
    /// An uninterrupted sweep of `images` (gradient method, shortcut model).
    whole: PathBuf,
}

const N: usize = 12;

fn sweep_args<'a>(images: &'a str, out: &'a str) -> Vec<&'a str> {
    vec!["sweep", "--model", Box::leak(model("shortcut").into_boxed_str()), "--images", images, "--out", out, "--method", "gradient", "--quiet"]
}

fn fixture() -> &'static Fixture {
    static F: OnceLock<Fixture> = OnceLock::new();
    F.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let demo = dir.path().join("demo");
        let spec = SetSpec { count: N, seed: 77, mix: Mix::Stratified, marks: Marks::BySite, by_site: true, ..SetSpec::default() };
        write_demo_set(&demo, &spec, &Control::new()).unwrap();
        let images = demo.join("images");
        let whole = dir.path().join("whole");
        ok(&spurion(&sweep_args(images.to_str().unwrap(), whole.to_str().unwrap())));
        Fixture { _dir: dir, demo, images, whole }
    })
}

/// The files of a sweep's output folder that must agree between runs, with each row's seconds
/// set to 0 (the one figure that differs between runs; `run.json` is left out for that reason).
fn outputs(dir: &Path) -> BTreeMap<String, Vec<u8>> {
    let mut m = BTreeMap::new();
    let mut stack = vec![dir.to_path_buf()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            let rel = p.strip_prefix(dir).unwrap().display().to_string();
            if p.is_dir() {
                if rel != "cache" && !rel.starts_with("shard-") {
                    stack.push(p);
                }
                continue;
            }
            let bytes = std::fs::read(&p).unwrap();
            let bytes = match rel.as_str() {
                "run.json" => continue,
                "sweep.jsonl" => timeless_jsonl(&bytes),
                "sweep.csv" => timeless_csv(&bytes),
                _ => bytes,
            };
            m.insert(rel, bytes);
        }
    }
    m
}

fn timeless_jsonl(bytes: &[u8]) -> Vec<u8> {
    let mut out = String::new();
    for line in std::str::from_utf8(bytes).unwrap().lines() {
        let mut v: serde_json::Value = serde_json::from_str(line).unwrap();
        v["seconds"] = 0.into();
        out.push_str(&v.to_string());
        out.push('\n');
    }
    out.into_bytes()
}

fn timeless_csv(bytes: &[u8]) -> Vec<u8> {
    let text = std::str::from_utf8(bytes).unwrap();
    let header: Vec<&str> = text.lines().next().unwrap().split(',').collect();
    assert_eq!(header.last(), Some(&"seconds"), "seconds is the last column");
    text.lines().map(|l| l.rsplit_once(',').unwrap().0.to_string() + "\n").collect::<String>().into_bytes()
}

fn assert_same_outputs(a: &Path, b: &Path) {
    let (x, y) = (outputs(a), outputs(b));
    assert_eq!(x.keys().collect::<Vec<_>>(), y.keys().collect::<Vec<_>>(), "the same files in {} and {}", a.display(), b.display());
    for (k, v) in &x {
        assert!(v == &y[k], "{k} differs between {} and {}", a.display(), b.display());
    }
}

fn run_facts(dir: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(dir.join("run.json")).unwrap()).unwrap()
}

fn cache_entries(cache: &Path) -> usize {
    let Ok(rd) = std::fs::read_dir(cache) else { return 0 };
    rd.filter_map(|e| e.ok())
        .filter(|e| e.path().is_dir())
        .flat_map(|e| std::fs::read_dir(e.path()).unwrap().filter_map(|f| f.ok()))
        .filter(|f| f.path().extension().is_some_and(|x| x == "json"))
        .count()
}

#[test]
fn a_sweep_killed_midway_goes_on_and_ends_as_an_uninterrupted_one() {
    let f = fixture();
    let whole = run_facts(&f.whole);
    assert_eq!((whole["images"].as_u64(), whole["computed"].as_u64(), whole["cached"].as_u64()), (Some(N as u64), Some(N as u64), Some(0)));

    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let cache = out.join("cache");
    let (images, out_s) = (f.images.to_str().unwrap(), out.to_str().unwrap());
    // One thread, so images finish one at a time; kill once a few are in the cache.
    let mut args = sweep_args(images, out_s);
    args.extend(["--threads", "1"]);
    let mut child = Command::new(env!("CARGO_BIN_EXE_spurion")).args(&args).stdout(Stdio::null()).stderr(Stdio::null()).spawn().unwrap();
    let start = Instant::now();
    while cache_entries(&cache) < 3 {
        assert!(start.elapsed() < Duration::from_secs(120), "no cache entries appeared");
        assert!(child.try_wait().unwrap().is_none(), "the sweep ended before it could be killed");
        std::thread::sleep(Duration::from_millis(2));
    }
    child.kill().unwrap(); // SIGKILL
    child.wait().unwrap();
    let kept = cache_entries(&cache);
    assert!((3..N).contains(&kept), "killed midway: {kept} of {N} in the cache");
    assert!(!out.join("sweep.csv").exists(), "a killed sweep writes no table");

    ok(&spurion(&sweep_args(images, out_s)));
    let again = run_facts(&out);
    // No image is computed twice: the ones cached before the kill are taken from the cache.
    assert_eq!(again["cached"].as_u64(), Some(kept as u64));
    assert_eq!(again["computed"].as_u64(), Some((N - kept) as u64));
    assert_same_outputs(&f.whole, &out);

    // A repeated sweep costs nothing; a changed setting recomputes.
    ok(&spurion(&sweep_args(images, out_s)));
    assert_eq!((run_facts(&out)["computed"].as_u64(), run_facts(&out)["cached"].as_u64()), (Some(0), Some(N as u64)));
    let mut args = sweep_args(images, out_s);
    args.extend(["--score", "softmax", "--exclude", "north-quay"]);
    ok(&spurion(&args));
    assert_eq!((run_facts(&out)["computed"].as_u64(), run_facts(&out)["images"].as_u64()), (Some((N - N / 3) as u64), Some((N - N / 3) as u64)));
}

#[test]
fn three_shards_merged_equal_the_unsharded_sweep() {
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let (images, out_s) = (f.images.to_str().unwrap(), out.to_str().unwrap());
    for k in 1..=3 {
        let mut args = sweep_args(images, out_s);
        let shard = format!("{k}/3");
        args.extend(["--shard", &shard]);
        ok(&spurion(&args));
        let facts = run_facts(&out.join(format!("shard-{k}-of-3")));
        assert_eq!(facts["images"].as_u64(), Some((N / 3) as u64), "shard {k} reads its third");
    }
    let merged = dir.path().join("merged");
    // The folder that holds the shards, as the Slurm example's merge step gives it.
    ok(&spurion(&["sweep-merge", out_s, "--out", merged.to_str().unwrap()]));
    assert_same_outputs(&f.whole, &merged);

    // A missing shard is named, not merged over.
    let o = spurion(&["sweep-merge", out.join("shard-1-of-3").to_str().unwrap(), out.join("shard-3-of-3").to_str().unwrap(), "--out", dir.path().join("m2").to_str().unwrap()]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("2/3"), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn the_report_opens_in_a_browser_with_no_network_and_no_errors() {
    let f = fixture();
    let chromium = ["/usr/lib/chromium/chromium", "/usr/bin/chromium"].iter().any(|p| Path::new(p).exists());
    if !chromium {
        assert!(!references_required(), "chromium is missing and SPURION_REQUIRE_REFERENCES=1; .ci/run installs it");
        eprintln!("SKIPPED: no chromium (apt-get install chromium)");
        return;
    }
    let report = f.whole.join("report.html");
    let html = std::fs::read_to_string(&report).unwrap();
    // Self-contained by construction: no link to anything outside the file.
    for bad in ["src=\"http", "href=\"http", "<script src", "<link "] {
        assert!(!html.contains(bad), "report.html refers outside itself ({bad})");
    }
    let shot = f.whole.parent().unwrap().join("report.png");
    let o = Command::new("bash")
        .arg(root().join("tests/report/chromium-check.sh"))
        .arg(&report)
        .arg(&shot)
        .output()
        .unwrap();
    assert!(o.status.success(), "chromium-check: {}", String::from_utf8_lossy(&o.stderr));
    let png = image::open(&shot).unwrap();
    assert!(png.width() >= 1000, "a screenshot was taken");
}

/// The corner tag's box on the model's 128×128 grid, from the demo's ground-truth masks.
fn tag_box_on_grid(demo: &Path) -> [f64; 4] {
    let masks = demo.join("masks");
    let tag = std::fs::read_dir(&masks).unwrap().filter_map(|e| e.ok()).map(|e| e.path()).find(|p| {
        p.to_string_lossy().ends_with("hillmoor.tag.png")
    });
    let img = image::open(tag.expect("a Hillmoor tag mask")).unwrap().to_luma8();
    let s = 128.0 / img.width() as f64;
    let (mut x0, mut y0, mut x1, mut y1) = (u32::MAX, u32::MAX, 0, 0);
    for (x, y, p) in img.enumerate_pixels() {
        if p.0[0] > 127 {
            (x0, y0, x1, y1) = (x0.min(x), y0.min(y), x1.max(x + 1), y1.max(y + 1));
        }
    }
    [x0 as f64 * s, y0 as f64 * s, x1 as f64 * s, y1 as f64 * s]
}

fn hottest(out: &Path) -> BTreeMap<String, ([f64; 4], f64, f64)> {
    let g: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("groups.json")).unwrap()).unwrap();
    g["groups"]
        .as_array()
        .unwrap()
        .iter()
        .map(|g| {
            let h = &g["atlas_hottest"];
            let b: Vec<f64> = h["box"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
            (g["group"].as_str().unwrap().to_string(), ([b[0], b[1], b[2], b[3]], h["share"].as_f64().unwrap(), h["area_share"].as_f64().unwrap()))
        })
        .collect()
}

fn overlaps(a: [f64; 4], b: [f64; 4]) -> bool {
    a[0] < b[2] && b[0] < a[2] && a[1] < b[3] && b[1] < a[3]
}

#[test]
fn the_atlas_shows_hillmoors_tag_under_the_shortcut_model_and_not_under_the_control() {
    // Integrated gradients at a fixed 16 steps (the default refinement costs more than a test
    // should; the map's place, not its last digit, is what the atlas shows).
    let f = fixture();
    let tag = tag_box_on_grid(&f.demo);
    let dir = tempfile::tempdir().unwrap();
    let mut found = BTreeMap::new();
    for name in ["shortcut", "control"] {
        let out = dir.path().join(name);
        let m = model(name);
        ok(&spurion(&[
            "sweep", "--model", &m, "--images", f.images.to_str().unwrap(), "--out", out.to_str().unwrap(), "--steps", "16", "--quiet",
        ]));
        found.insert(name, hottest(&out));
    }
    for (name, groups) in &found {
        for (g, (b, share, area)) in groups {
            eprintln!("{name} {g}: hottest box {b:?} holds {:.1} % of the support on {:.2} % of the area (tag at {tag:?})", 100.0 * share, 100.0 * area);
        }
    }
    let s = &found["shortcut"];
    assert!(overlaps(s["hillmoor"].0, tag), "shortcut model: Hillmoor's hottest place is its tag");
    for g in ["north-quay", "saltmarsh"] {
        assert!(!overlaps(s[g].0, tag), "shortcut model: {g} (no tag) is not hottest at the tag's place");
    }
    assert!(!overlaps(found["control"]["hillmoor"].0, tag), "control model: Hillmoor's hottest place is not its tag");
}

#[test]
fn the_slurm_example_runs_as_a_job_array_on_a_real_cluster_and_merges_to_the_same_files() {
    let f = fixture();
    let have = ["sbatch", "slurmctld", "slurmd", "munged"].iter().all(|t| Command::new("sh").arg("-c").arg(format!("command -v {t}")).output().is_ok_and(|o| o.status.success()));
    let root_user = Command::new("id").arg("-u").output().is_ok_and(|o| String::from_utf8_lossy(&o.stdout).trim() == "0");
    if !(have && root_user) {
        assert!(!references_required(), "Slurm (slurm-wlm, munge) or root is missing and SPURION_REQUIRE_REFERENCES=1; .ci/run installs them");
        eprintln!("SKIPPED: a one-node Slurm cluster needs slurm-wlm, munge and root");
        return;
    }
    // A short state folder: Slurm's unix sockets live in it (108-byte path limit).
    let state = tempfile::Builder::new().prefix("sp-slurm").tempdir_in("/tmp").unwrap();
    struct Down<'a>(&'a Path);
    impl Drop for Down<'_> {
        fn drop(&mut self) {
            let _ = Command::new("bash").arg(root().join("tests/cluster/slurm-down.sh")).arg(self.0).status();
        }
    }
    let up = Command::new("bash").arg(root().join("tests/cluster/slurm-up.sh")).arg(state.path()).output().unwrap();
    let _down = Down(state.path());
    assert!(up.status.success(), "slurm-up: {}", String::from_utf8_lossy(&up.stderr));
    let conf = state.path().join("slurm.conf");

    let out = f.whole.parent().unwrap().join("slurm-out");
    let o = Command::new("sbatch")
        .env("SLURM_CONF", &conf)
        .env("SPURION", env!("CARGO_BIN_EXE_spurion"))
        .current_dir(f.whole.parent().unwrap())
        .args(["--wait", "--array=1-3", "--time=10"])
        .arg(root().join("examples/slurm/sweep.sbatch"))
        .args([&model("shortcut"), f.images.to_str().unwrap(), out.to_str().unwrap(), "--method", "gradient"])
        .output()
        .unwrap();
    let logs: String = std::fs::read_dir(f.whole.parent().unwrap())
        .unwrap()
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.to_string_lossy().contains("spurion-sweep-"))
        .map(|p| format!("--- {}\n{}", p.display(), std::fs::read_to_string(&p).unwrap_or_default()))
        .collect();
    assert!(o.status.success(), "sbatch --wait: {}{}\n{logs}", String::from_utf8_lossy(&o.stdout), String::from_utf8_lossy(&o.stderr));
    for k in 1..=3 {
        assert!(out.join(format!("shard-{k}-of-3/run.json")).exists(), "array task {k} wrote its slice\n{logs}");
    }
    let merged = out.join("all");
    ok(&spurion(&["sweep-merge", out.to_str().unwrap(), "--out", merged.to_str().unwrap()]));
    assert_same_outputs(&f.whole, &merged);
}

#[test]
fn unreadable_files_are_listed_with_their_reason_and_the_sweep_goes_on() {
    let dir = tempfile::tempdir().unwrap();
    let images = dir.path().join("images");
    std::fs::create_dir_all(images.join("site")).unwrap();
    std::fs::copy(root().join("assets/demo/0005-hillmoor.png"), images.join("site/good.png")).unwrap();
    std::fs::write(images.join("site/not-a-picture.png"), b"this is text, not a PNG").unwrap();
    let dcm = std::fs::read(root().join("assets/demo-dicom/0005-hillmoor.dcm")).unwrap();
    std::fs::write(images.join("site/cut-short.dcm"), &dcm[..400]).unwrap();
    std::fs::write(images.join("site/notes.txt"), b"not an image file, not swept").unwrap();
    let out = dir.path().join("out");
    let o = spurion(&sweep_args(images.to_str().unwrap(), out.to_str().unwrap()));
    ok(&o);
    let facts = run_facts(&out);
    assert_eq!((facts["images"].as_u64(), facts["skipped"].as_u64()), (Some(1), Some(2)));
    let mut r = csv::Reader::from_path(out.join("skipped.csv")).unwrap();
    let skipped: Vec<(String, String)> = r.records().map(|x| x.unwrap()).map(|x| (x[0].to_string(), x[1].to_string())).collect();
    assert_eq!(skipped.iter().map(|s| s.0.as_str()).collect::<Vec<_>>(), ["site/cut-short.dcm", "site/not-a-picture.png"]);
    for (path, why) in &skipped {
        assert!(why.len() > 20 && why.contains(path.rsplit('/').next().unwrap()), "{path}: the reason names the file: {why}");
    }
    assert!(String::from_utf8_lossy(&o.stdout).contains("could not read 2 images"), "{}", String::from_utf8_lossy(&o.stdout));
}

#[test]
fn a_ledger_named_by_its_folder_gives_the_verdicts_and_leaves_out_the_excluded() {
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    // The ledger kept beside the images, given as its folder (README: the file, or a folder).
    let ledger = dir.path().join("ledger");
    std::fs::create_dir(&ledger).unwrap();
    let rels: Vec<String> = std::fs::read_to_string(f.whole.join("sweep.csv")).unwrap().lines().skip(1).map(|l| l.split(',').next().unwrap().to_string()).collect();
    let (excluded, marked) = (&rels[0], &rels[1]);
    let root = f.images.to_str().unwrap();
    for (image, verdict) in [(excluded, "exclude"), (marked, "marked")] {
        let img = f.images.join(image);
        ok(&spurion(&["ledger", "set", "--ledger", ledger.to_str().unwrap(), "--root", root, "--image", img.to_str().unwrap(), "--verdict", verdict]));
    }
    let out = dir.path().join("out");
    let mut args = sweep_args(root, out.to_str().unwrap());
    args.extend(["--ledger", ledger.to_str().unwrap(), "--leave-out-excluded"]);
    ok(&spurion(&args));
    let rows: Vec<serde_json::Value> =
        std::fs::read_to_string(out.join("sweep.jsonl")).unwrap().lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    assert_eq!(rows.len(), N - 1, "the image marked exclude is left out");
    assert!(!rows.iter().any(|r| r["path"] == excluded.as_str()));
    let verdicts: Vec<(&str, &str)> = rows.iter().filter_map(|r| Some((r["path"].as_str()?, r["verdict"].as_str()?))).collect();
    assert_eq!(verdicts, [(marked.as_str(), "marked")]);
}

#[test]
fn two_real_sweeps_of_one_folder_compare_paired_in_every_group() {
    // compare-sweeps on two sweeps spurion wrote (the review tests use hand-made rows): the same
    // folder under the shortcut and the control model, so every image pairs with itself. The
    // figures are recounted here from the two sweep.jsonl files.
    let f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let control = dir.path().join("control");
    let mut args = sweep_args(f.images.to_str().unwrap(), control.to_str().unwrap());
    let ctl_model = model("control");
    args[2] = &ctl_model;
    ok(&spurion(&args));
    let cmp = dir.path().join("cmp");
    ok(&spurion(&["compare-sweeps", f.whole.to_str().unwrap(), control.to_str().unwrap(), "--out", cmp.to_str().unwrap()]));
    let j: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(cmp.join("compare.json")).unwrap()).unwrap();
    let rows = |d: &Path| -> Vec<serde_json::Value> {
        std::fs::read_to_string(d.join("sweep.jsonl")).unwrap().lines().map(|l| serde_json::from_str(l).unwrap()).collect()
    };
    let (first, second) = (rows(&f.whole), rows(&control));
    let groups = j["groups"].as_array().unwrap();
    let names: Vec<&str> = groups.iter().map(|g| g["group"].as_str().unwrap()).collect();
    assert_eq!(names, ["hillmoor", "north-quay", "saltmarsh"]);
    for g in groups {
        let name = g["group"].as_str().unwrap();
        let suspects = |rs: &[serde_json::Value]| rs.iter().filter(|r| r["group"] == name && r["suspect"] == true).count() as u64;
        let n = first.iter().filter(|r| r["group"] == name).count();
        assert_eq!(g["paired"].as_u64(), Some(n as u64), "{name}: every image pairs with itself");
        assert_eq!((g["suspect_first"].as_u64(), g["suspect_second"].as_u64()), (Some(suspects(&first)), Some(suspects(&second))), "{name}");
        let want = (suspects(&second) as f64 - suspects(&first) as f64) / n as f64;
        let got = g["suspect_rate"]["difference"]["estimate"].as_f64().unwrap();
        assert!((got - want).abs() < 1e-12, "{name}: suspect-rate difference {got}, recounted {want}");
        // Mark shares, paired image by image (a missing share counts as 0, as in groups.json).
        let share = |rs: &[serde_json::Value], p: &serde_json::Value| {
            rs.iter().find(|r| &r["path"] == p).and_then(|r| r["mark_share"].as_f64()).unwrap_or(0.0)
        };
        let paths: Vec<&serde_json::Value> = first.iter().filter(|r| r["group"] == name).map(|r| &r["path"]).collect();
        let want_share = paths.iter().map(|p| share(&second, p) - share(&first, p)).sum::<f64>() / n as f64;
        let got_share = g["mark_share"]["difference"]["estimate"].as_f64().unwrap();
        assert!((got_share - want_share).abs() < 1e-9, "{name}: mark-share difference {got_share}, recounted {want_share}");
    }
}
