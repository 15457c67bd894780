//! `spurion clean`: the cleaned copy of demo data (PNG and DICOM) and of a compressed pydicom
//! test file, read back by pydicom 3.0.2 (tests/reference/clean_readback.py) and checked with
//! dicom3tools' dciodvfy; a run killed with SIGKILL goes on and ends as an uninterrupted one;
//! the source folder is never written; the manifest lists every picked image.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use serde::Deserialize;
use sha2::{Digest, Sha256};
use spurion::clean::{self, Job, LedgerRegions, LedgerSource, Source};
use spurion::control::Control;
use spurion::demo::{SetSpec, write_demo_set};
use spurion::feed::OpenOptions;
use spurion::ledger::{Change, Edit, Ledger, Verdict, commit};
use spurion::regions::RegionKind;
use spurion::regions::drawn::{DrawnShape, Shape};

/// Every file below `dir` (relative path → SHA-256).
fn hashes(dir: &Path) -> BTreeMap<String, String> {
    fn walk(root: &Path, d: &Path, out: &mut BTreeMap<String, String>) {
        for e in std::fs::read_dir(d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                walk(root, &p, out);
            } else {
                let rel = p.strip_prefix(root).unwrap().to_string_lossy().replace('\\', "/");
                out.insert(rel, hex(&std::fs::read(&p).unwrap()));
            }
        }
    }
    let mut m = BTreeMap::new();
    walk(dir, dir, &mut m);
    m
}

fn hex(b: &[u8]) -> String {
    Sha256::digest(b).iter().map(|x| format!("{x:02x}")).collect()
}

fn demo(dir: &Path, spec: SetSpec) -> PathBuf {
    write_demo_set(dir, &spec, &Control::new()).unwrap();
    dir.to_path_buf()
}

/// A ledger outside `root` giving `verdict` to each of `files` (relative to `root`).
fn ledger(at: &Path, root: &Path, files: &[String], verdict: Verdict) -> PathBuf {
    let path = at.join("spurion-ledger.json");
    let mut w = spurion::ledger::DiskWriter;
    commit(&path, Some(root), &mut w, |l: &mut Ledger| {
        for f in files {
            l.apply(&Change::verdict(f.clone(), Some(verdict)));
        }
    })
    .unwrap();
    path
}

fn all_kinds() -> Vec<RegionKind> {
    vec![RegionKind::BorderBand, RegionKind::BurnedInMark, RegionKind::DrawnRegion]
}

#[derive(Deserialize, Debug)]
struct ManifestRow {
    file: String,
    action: String,
    picked_by: String,
    regions: String,
    boxes: String,
    fill: String,
    pixels_painted: usize,
    pixels_changed: usize,
    sha256_before: String,
    sha256_after: String,
    burned_in_before: String,
    burned_in_after: String,
    note: String,
    settings: String,
}

fn manifest(out: &Path) -> Vec<ManifestRow> {
    csv::Reader::from_path(out.join("spurion-clean.csv")).unwrap().deserialize().map(|r| r.unwrap()).collect()
}

fn boxes(row: &ManifestRow) -> Vec<[usize; 4]> {
    row.boxes
        .split("; ")
        .map(|b| {
            let v: Vec<usize> = b.split(' ').map(|x| x.parse().unwrap()).collect();
            [v[0], v[1], v[2], v[3]]
        })
        .collect()
}

/// Checks the manifest against the files: every picked image listed, the hashes those of the
/// source and the copy, every other file copied byte for byte.
fn assert_manifest_complete(src: &Path, out: &Path, picked: &[String]) -> Vec<ManifestRow> {
    let rows = manifest(out);
    let (before, after) = (hashes(src), hashes(out));
    let listed: Vec<&str> = rows.iter().map(|r| r.file.as_str()).collect();
    for p in picked {
        assert!(listed.contains(&p.as_str()), "{p} was picked but is not in the manifest");
    }
    for r in &rows {
        assert_eq!(before[&r.file], r.sha256_before, "{}: hash before", r.file);
        assert_eq!(after[&r.file], r.sha256_after, "{}: hash after", r.file);
        assert!(!r.settings.is_empty() && r.settings.len() == 16);
        if r.action == "cleaned" {
            assert_ne!(r.sha256_before, r.sha256_after, "{}: a cleaned file differs", r.file);
            assert!(r.pixels_changed > 0 && r.pixels_changed <= r.pixels_painted && !r.regions.is_empty() && !r.fill.is_empty());
        }
    }
    for (f, h) in &before {
        if !rows.iter().any(|r| &r.file == f && r.action == "cleaned") {
            assert_eq!(after.get(f), Some(h), "{f} is copied byte for byte");
        }
    }
    for f in after.keys() {
        assert!(!f.ends_with(".spurion-tmp"), "a temporary file was left: {f}");
        assert!(before.contains_key(f) || f.starts_with(".spurion-clean/") || f.starts_with("spurion-"), "{f} is not the source's");
    }
    rows
}

fn dciodvfy_errors(file: &Path) -> Option<Vec<String>> {
    let out = match Command::new("dciodvfy").arg(file).output() {
        Ok(o) => o,
        Err(_) if !crate::common::references_required() => {
            eprintln!("SKIPPED: dciodvfy (Debian's dicom3tools) is not installed; .ci/run installs it");
            return None;
        }
        Err(e) => panic!("dciodvfy could not be started ({e}) and SPURION_REQUIRE_REFERENCES=1"),
    };
    let text = String::from_utf8_lossy(&out.stderr).into_owned() + &String::from_utf8_lossy(&out.stdout);
    Some(text.lines().filter(|l| l.starts_with("Error")).map(str::to_string).collect())
}

#[derive(Deserialize, Debug)]
struct Readback {
    file: String,
    transfer_syntax: String,
    media_sop_instance: String,
    sop_instance: String,
    original_sop_instance: String,
    original_sop_class: String,
    image_type: Option<Vec<String>>,
    source: Vec<[String; 2]>,
    deid_codes: Vec<[String; 3]>,
    dictionary: [String; 3],
    burned_in: Option<String>,
    kept: BTreeMap<String, [serde_json::Value; 2]>,
    identity_kept: bool,
    shape: [Vec<usize>; 2],
    dtype: [String; 2],
    diff_box: Option<[usize; 4]>,
    changed_pixels: usize,
}

fn readback(src: &Path, out: &Path, files: &[&str]) -> Vec<Readback> {
    let py = crate::common::reference_python().expect("checked by the caller");
    let mut args = vec![src.to_str().unwrap(), out.to_str().unwrap()];
    args.extend(files);
    crate::common::run_python(&py, "clean_readback.py", &args).lines().map(|l| serde_json::from_str(l).unwrap()).collect()
}

fn inside_any(b: [usize; 4], boxes: &[[usize; 4]]) -> bool {
    // The box of all changed pixels lies within the box around all painted regions.
    let (x0, y0) = (boxes.iter().map(|r| r[0]).min().unwrap(), boxes.iter().map(|r| r[1]).min().unwrap());
    let (x1, y1) = (boxes.iter().map(|r| r[2]).max().unwrap(), boxes.iter().map(|r| r[3]).max().unwrap());
    b[0] >= x0 && b[1] >= y0 && b[2] <= x1 && b[3] <= y1
}

/// Samples differing between two stored frames lie only under the painted regions' boxes.
fn assert_changes_inside(orig: &Path, cleaned: &Path, boxes: &[[usize; 4]]) {
    let a = spurion::feed::dicom::read_stored(orig).unwrap();
    let b = spurion::feed::dicom::read_stored(cleaned).unwrap();
    assert_eq!((a.rows, a.columns, a.bits_allocated, a.bits_stored, a.signed), (b.rows, b.columns, b.bits_allocated, b.bits_stored, b.signed));
    let bps = usize::from(a.bits_allocated / 8) * a.samples_per_pixel;
    for (fa, fb) in a.frames.iter().zip(&b.frames) {
        for (p, (x, y)) in fa.chunks(bps).zip(fb.chunks(bps)).enumerate() {
            if x != y {
                let (r, c) = (p / a.columns, p % a.columns);
                assert!(boxes.iter().any(|b| c >= b[0] && c < b[2] && r >= b[1] && r < b[3]), "{}: pixel ({r}, {c}) changed outside every painted box", cleaned.display());
            }
        }
    }
}

#[test]
fn cleaned_demo_dicom_stays_valid_and_changes_only_the_painted_pixels() {
    let dir = tempfile::tempdir().unwrap();
    let spec = SetSpec { count: 6, seed: 5, dicom: 6, masks: false, ..SetSpec::default() };
    let root = demo(&dir.path().join("demo"), spec);
    let src = root.join("dicom");
    let mut files: Vec<String> = std::fs::read_dir(&src).unwrap().map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).collect();
    files.sort();
    let hillmoor: Vec<String> = files.iter().filter(|f| f.contains("hillmoor")).cloned().collect();
    assert_eq!(hillmoor.len(), 2);
    let led = ledger(dir.path(), &src, &hillmoor, Verdict::Marked);
    let source = LedgerSource::open(&led, vec![Verdict::Marked], LedgerRegions::DrawnElseFound, Default::default()).unwrap();
    let before = hashes(&src);
    let out = dir.path().join("clean");
    let job = Job {
        images: src.clone(),
        out: out.clone(),
        exclude: vec![],
        sources: vec![&source as &dyn Source],
        open: OpenOptions::default(),
        kinds: all_kinds(),
        min_confidence: 0.0,
    };
    let o = clean::run(&job, &Control::new()).unwrap();
    assert_eq!((o.files, o.cleaned, o.copied), (6, 2, 4));
    assert_eq!(hashes(&src), before, "the source folder is untouched");
    let rows = assert_manifest_complete(&src, &out, &hillmoor);
    for r in &rows {
        // The tag and the frame are both painted, and nothing else the finders know remains.
        assert!(r.regions.contains("border band") && r.regions.contains("burned-in mark"), "{}: {}", r.file, r.regions);
        assert_eq!((r.burned_in_before.as_str(), r.burned_in_after.as_str()), ("YES", "NO"), "{}", r.file);
        assert_eq!(r.fill, "edge-carry then harmonic");
        assert!(r.note.is_empty(), "an uncompressed file needs no note: {}", r.note);
        assert_changes_inside(&src.join(&r.file), &out.join(&r.file), &boxes(r));
    }
    // spurion's own reader: the copy reads, and says what remains.
    for f in &hillmoor {
        let img = spurion::feed::dicom::read_dicom(&out.join(f), 0).unwrap();
        assert_eq!(img.burned_in_annotation, Some(false));
        assert_eq!(img.modality.as_deref(), Some("DX"));
    }
    // dciodvfy (dicom3tools): the demo files and their cleaned copies give no error.
    for f in &files {
        for p in [src.join(f), out.join(f)] {
            if let Some(errors) = dciodvfy_errors(&p) {
                assert!(errors.is_empty(), "dciodvfy on {}: {errors:?}", p.display());
            }
        }
    }
    // pydicom 3.0.2 reads every cleaned file.
    let Some(_) = crate::common::reference_python() else { return };
    let names: Vec<&str> = hillmoor.iter().map(String::as_str).collect();
    for (rb, row) in readback(&src, &out, &names).iter().zip(&rows) {
        assert_eq!(rb.file, row.file);
        assert_eq!(rb.transfer_syntax, "1.2.840.10008.1.2.1", "Explicit VR Little Endian (PS3.5 A.2)");
        assert_ne!(rb.sop_instance, rb.original_sop_instance, "a derived image gets a new SOP Instance UID");
        assert_eq!(rb.media_sop_instance, rb.sop_instance);
        assert_eq!(rb.source, vec![[rb.original_sop_class.clone(), rb.original_sop_instance.clone()]], "the original is referenced");
        assert_eq!(rb.image_type.as_ref().unwrap()[0], "DERIVED");
        // The code as pydicom's dictionary (generated from PS3.16) has it, and as written.
        assert_eq!(rb.dictionary, ["113101", "DCM", "Clean Pixel Data Option"]);
        assert_eq!(rb.deid_codes, vec![rb.dictionary.clone()]);
        assert_eq!(rb.burned_in.as_deref(), Some("NO"));
        for (k, [a, b]) in &rb.kept {
            assert_eq!(a, b, "{}: {k} kept", rb.file);
        }
        assert!(rb.identity_kept, "the identifying attributes are carried over as they were, not changed");
        assert_eq!(rb.shape[0], rb.shape[1]);
        assert_eq!(rb.dtype[0], rb.dtype[1]);
        assert_eq!(rb.changed_pixels, row.pixels_changed, "pydicom sees the pixels the manifest counts");
        assert!(inside_any(rb.diff_box.unwrap(), &boxes(row)));
    }
}

#[test]
fn compressed_big_endian_colour_and_multi_frame_files_are_cleaned_into_valid_uncompressed_ones() {
    let Some(_) = crate::common::reference_python() else { return };
    // pydicom's bundled test files (pydicom 3.0.2), each with a box drawn as a curator would
    // draw it over a label: (file, box, image size [columns, rows], frames, what the note says).
    let cases: [(&str, [usize; 4], [usize; 2], usize, &[&str]); 4] = [
        ("MR_small_RLE.dcm", [4, 6, 20, 14], [64, 64], 1, &["written uncompressed (Explicit VR Little Endian) from RLE Lossless"]),
        ("SC_rgb_rle.dcm", [10, 10, 40, 30], [100, 100], 1, &["written uncompressed (Explicit VR Little Endian) from RLE Lossless"]),
        ("ExplVR_BigEnd.dcm", [5, 5, 30, 20], [80, 60], 1, &["written as Explicit VR Little Endian from", "Planar Configuration 1 written as 0"]),
        ("rtdose.dcm", [2, 2, 5, 5], [10, 10], 15, &["written as Explicit VR Little Endian from"]),
    ];
    let dir = tempfile::tempdir().unwrap();
    let src = dir.path().join("src");
    std::fs::create_dir_all(&src).unwrap();
    let led = dir.path().join("spurion-ledger.json");
    for (name, b, size, _, _) in &cases {
        std::fs::copy(crate::dicom_common::dicom_path(name, false), src.join(name)).unwrap();
        let shape = DrawnShape { label: "label".into(), shape: Shape::Rect { bbox: b.map(|v| v as f64) } };
        commit(&led, Some(&src), &mut spurion::ledger::DiskWriter, |l: &mut Ledger| {
            l.apply(&Change::verdict(*name, Some(Verdict::Marked)));
            l.apply(&Change::now(*name, Edit::AddDrawn { shapes: vec![shape], image_size: Some(*size) }));
        })
        .unwrap();
    }
    let source = LedgerSource::open(&led, vec![Verdict::Marked], LedgerRegions::Drawn, Default::default()).unwrap();
    let out = dir.path().join("clean");
    let job = Job { images: src.clone(), out: out.clone(), exclude: vec![], sources: vec![&source], open: OpenOptions::default(), kinds: all_kinds(), min_confidence: 0.0 };
    let before = hashes(&src);
    clean::run(&job, &Control::new()).unwrap();
    assert_eq!(hashes(&src), before);
    let names: Vec<String> = cases.iter().map(|c| c.0.to_string()).collect();
    let rows = assert_manifest_complete(&src, &out, &names);
    for (name, b, _, frames, notes) in &cases {
        let row = rows.iter().find(|r| r.file == *name).unwrap();
        assert_eq!(row.boxes, format!("{} {} {} {}", b[0], b[1], b[2], b[3]));
        assert_eq!(row.pixels_painted, (b[2] - b[0]) * (b[3] - b[1]) * frames, "{name}: every frame is painted");
        for n in *notes {
            assert!(row.note.contains(n), "{name}: {}", row.note);
        }
        assert_changes_inside(&src.join(name), &out.join(name), &[*b]);
        if let Some(errors) = dciodvfy_errors(&out.join(name)) {
            // dciodvfy's verdict on the original is the bar: the copy adds no error of its own.
            let base = dciodvfy_errors(&src.join(name)).unwrap();
            let new: Vec<&String> = errors.iter().filter(|e| !base.contains(e)).collect();
            assert!(new.is_empty(), "{name}: dciodvfy errors the cleaning added: {new:?}");
        }
    }
    let refs: Vec<&str> = names.iter().map(String::as_str).collect();
    for (rb, (name, b, _, _, _)) in readback(&src, &out, &refs).iter().zip(&cases) {
        assert_eq!(rb.transfer_syntax, "1.2.840.10008.1.2.1", "{name}");
        assert!(inside_any(rb.diff_box.unwrap(), &[*b]), "{name}: {:?}", rb.diff_box);
        for (k, [x, y]) in &rb.kept {
            assert_eq!(x, y, "{name}: {k} kept");
        }
        assert_eq!(rb.shape[0], rb.shape[1], "{name}");
        assert_eq!(rb.dtype[0], rb.dtype[1], "{name}");
        assert_eq!(rb.deid_codes, vec![rb.dictionary.clone()]);
    }
}

fn spurion_clean(src: &Path, out: &Path, led: &Path) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_spurion"));
    c.args(["clean", "--images", src.to_str().unwrap(), "--out", out.to_str().unwrap(), "--ledger", led.to_str().unwrap(), "--threads", "1", "-q"]);
    c
}

fn journal_lines(out: &Path) -> usize {
    std::fs::read_to_string(out.join(".spurion-clean/journal.jsonl")).map(|t| t.lines().count()).unwrap_or(0)
}

#[test]
fn a_cleaning_killed_midway_goes_on_and_ends_as_an_uninterrupted_one() {
    let dir = tempfile::tempdir().unwrap();
    let n = 90;
    let root = demo(&dir.path().join("demo"), SetSpec { count: n, seed: 9, masks: true, by_site: true, ..SetSpec::default() });
    let src = root.join("images");
    let hill: Vec<String> = std::fs::read_dir(src.join("hillmoor")).unwrap().map(|e| format!("hillmoor/{}", e.unwrap().file_name().to_string_lossy())).collect();
    let led = ledger(dir.path(), &src, &hill, Verdict::Marked);
    let before = hashes(&src);

    let whole = dir.path().join("whole");
    let o = spurion_clean(&src, &whole, &led).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_manifest_complete(&src, &whole, &hill);

    // Killed three times at growing depths, then left to finish.
    let out = dir.path().join("killed");
    let mut kills = 0;
    for depth in [3, 20, 45] {
        let mut child = spurion_clean(&src, &out, &led).stdout(Stdio::null()).stderr(Stdio::null()).spawn().unwrap();
        let start = Instant::now();
        while journal_lines(&out) < depth {
            assert!(start.elapsed() < Duration::from_secs(120), "the journal did not grow");
            if child.try_wait().unwrap().is_some() {
                break;
            }
            std::thread::sleep(Duration::from_millis(1));
        }
        if child.try_wait().unwrap().is_none() {
            child.kill().unwrap(); // SIGKILL
            kills += 1;
        }
        child.wait().unwrap();
        assert!(!out.join("spurion-clean.csv").exists() || journal_lines(&out) == n, "a killed run writes no manifest");
    }
    assert!(kills >= 2, "the run was killed midway at least twice ({kills})");
    let done_before = journal_lines(&out);
    assert!(done_before < n, "killed before the end: {done_before} of {n}");
    let o = spurion_clean(&src, &out, &led).output().unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let said = String::from_utf8_lossy(&o.stdout);
    assert!(said.contains("were done by an earlier run"), "{said}");
    // File for file the same, the run's own journal and counts aside.
    let products = |d: &Path| {
        let mut h = hashes(d);
        h.retain(|k, _| !k.starts_with(".spurion-clean/") && k != "spurion-clean.json");
        h
    };
    assert_eq!(products(&out), products(&whole), "the resumed copy equals the uninterrupted one");
    let summary = |d: &Path| serde_json::from_str::<serde_json::Value>(&std::fs::read_to_string(d.join("spurion-clean.json")).unwrap()).unwrap();
    assert_eq!(summary(&out)["settings"], summary(&whole)["settings"]);
    assert_eq!(summary(&out)["outcome"]["cleaned"], summary(&whole)["outcome"]["cleaned"]);
    assert_eq!(hashes(&src), before, "the source folder is untouched");

    // Other settings into the same folder are refused, and the folder is left as it was.
    let o = Command::new(env!("CARGO_BIN_EXE_spurion"))
        .args(["clean", "--images", src.to_str().unwrap(), "--out", out.to_str().unwrap(), "--ledger", led.to_str().unwrap(), "--kinds", "burned-in-mark"])
        .output()
        .unwrap();
    assert!(!o.status.success());
    assert!(String::from_utf8_lossy(&o.stderr).contains("other settings"), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(products(&out), products(&whole));
}

#[derive(Deserialize)]
struct SweepRow {
    path: String,
    suspect: bool,
    region_labels: String,
}

#[test]
fn a_sweeps_suspect_images_are_cleaned_of_the_regions_it_found_and_checked() {
    let dir = tempfile::tempdir().unwrap();
    let root = demo(&dir.path().join("demo"), SetSpec { count: 12, seed: 77, by_site: true, masks: false, ..SetSpec::default() });
    let src = root.join("images");
    let model = crate::common::root().join("sample-models/shortcut.onnx");
    let sweep = dir.path().join("sweep");
    let run = |args: &[&str]| {
        let o = Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().unwrap();
        assert!(o.status.success(), "{args:?}: {}", String::from_utf8_lossy(&o.stderr));
        String::from_utf8_lossy(&o.stdout).into_owned()
    };
    let s = |p: &Path| p.to_str().unwrap().to_string();
    run(&["sweep", "--model", &s(&model), "--images", &s(&src), "--out", &s(&sweep), "--method", "gradient", "--quiet"]);
    let rows: Vec<SweepRow> = std::fs::read_to_string(sweep.join("sweep.jsonl")).unwrap().lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    let suspect: Vec<&SweepRow> = rows.iter().filter(|r| r.suspect).collect();
    assert!(!suspect.is_empty(), "the shortcut model makes some demo images suspect");
    let out = dir.path().join("clean");
    let labels = format!("{}:label", root.join("manifest.csv").display());
    let said = run(&["clean", "--images", &s(&src), "--out", &s(&out), "--sweep", &s(&sweep), "--check", &s(&model), "--labels", &labels, "-q"]);
    let picked: Vec<String> = suspect.iter().map(|r| r.path.clone()).collect();
    let listed = assert_manifest_complete(&src, &out, &picked);
    assert_eq!(listed.len(), suspect.len(), "with no limit given, exactly the suspect images are picked");
    for (m, r) in listed.iter().zip(&suspect) {
        assert_eq!(m.file, r.path);
        assert!(m.picked_by.starts_with("sweep: suspect"), "{}", m.picked_by);
        // The regions painted are the ones the sweep recorded.
        let mut a: Vec<&str> = m.regions.split("; ").collect();
        let mut b: Vec<&str> = r.region_labels.split("; ").collect();
        a.sort();
        b.sort();
        assert_eq!(a, b, "{}", m.file);
    }
    // The check's table is printed and written, and its JSON holds every image.
    assert!(said.contains("predictions changed") && said.contains("hillmoor"), "{said}");
    let check: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("spurion-check.json")).unwrap()).unwrap();
    assert_eq!(check["check"]["images"].as_array().unwrap().len(), 12);
    assert_eq!(check["check"]["all"]["labelled"], 12);
    assert!(std::fs::read_to_string(out.join("spurion-check.txt")).unwrap().contains("accuracy before"));
    // A limit nothing passes picks nothing: every file is copied as it is.
    let none = dir.path().join("none");
    run(&["clean", "--images", &s(&src), "--out", &s(&none), "--sweep", &s(&sweep), "--min-mark-share", "1.5", "-q"]);
    assert!(manifest(&none).is_empty());
    assert_eq!(hashes(&src).into_iter().collect::<Vec<_>>(), {
        let mut h = hashes(&none);
        h.retain(|k, _| !k.starts_with(".spurion-clean/") && !k.starts_with("spurion-clean"));
        h.into_iter().collect::<Vec<_>>()
    });
}
