//! Recurring hotspots in a real sweep: groups.json lists them with members that are the rows'
//! own hotspots, report.html shows them, and `spurion ledger accept-cluster` marks every image of
//! a cluster in one durable change (read back from disk by a fresh process' view of the file),
//! once however often it is run.

use std::collections::BTreeSet;
use std::process::{Command, Output};

use spurion::control::Control;
use spurion::demo::{Marks, Mix, SetSpec, write_demo_set};
use spurion::ledger::{Ledger, Verdict};
use spurion::regions::drawn::Shape;
use spurion::sweep::{GroupsFile, Row};

use crate::common::root;

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion"))
        .args(args)
        .output()
        .expect("run spurion")
}

fn ok(o: &Output) {
    assert!(
        o.status.success(),
        "exit {:?}\nstdout: {}\nstderr: {}",
        o.status,
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    );
}

#[test]
fn a_sweep_lists_recurring_hotspots_and_a_cluster_is_accepted_for_all_its_images_at_once() {
    let dir = tempfile::tempdir().unwrap();
    let demo = dir.path().join("demo");
    // The shortcut model on a stratified demo by site: its maps light Hillmoor's tag up.
    let spec = SetSpec {
        count: 18,
        seed: 41,
        mix: Mix::Stratified,
        marks: Marks::BySite,
        by_site: true,
        ..SetSpec::default()
    };
    write_demo_set(&demo, &spec, &Control::new()).unwrap();
    let images = demo.join("images");
    let out = dir.path().join("out");
    let model = root().join("sample-models/shortcut.onnx");
    ok(&spurion(&[
        "sweep",
        "--model",
        model.to_str().unwrap(),
        "--images",
        images.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--method",
        "gradient",
        "--quiet",
    ]));
    let file = GroupsFile::read(&out).unwrap();
    assert_eq!(file.groups.len(), 3);
    let rows: Vec<Row> = std::fs::read_to_string(out.join("sweep.jsonl"))
        .unwrap()
        .lines()
        .map(|l| serde_json::from_str(l).unwrap())
        .collect();
    let clusters = &file.recurring_hotspots;
    for c in clusters {
        eprintln!(
            "cluster {}: {} images, {} hotspots, {} {:?}, mark-likeness {:.2}, flips {}/{}, groups {:?}, classes {:?}",
            c.id,
            c.images,
            c.hotspots,
            c.place_kind,
            c.place,
            c.mark_likeness,
            c.flips,
            c.tested,
            c.groups,
            c.classes
        );
    }
    assert!(
        !clusters.is_empty(),
        "Hillmoor's tag recurs in its six images"
    );
    for (k, c) in clusters.iter().enumerate() {
        assert_eq!(c.id, k + 1);
        let paths: BTreeSet<&str> = c.members.iter().map(|m| m.path.as_str()).collect();
        assert_eq!(paths.len(), c.images);
        assert!(c.images >= 3 && c.hotspots == c.members.len());
        assert_eq!(c.groups.values().sum::<usize>(), c.images);
        // Every member is one of its row's hotspots, with the same box.
        for m in &c.members {
            let row = rows
                .iter()
                .find(|r| r.path == m.path)
                .expect("a member's image is a row");
            assert_eq!(row.hotspots[m.hotspot].bbox, m.bbox, "{}", m.path);
        }
        assert!(
            c.exemplars.len() <= 4 && c.exemplars.iter().all(|e| paths.contains(e.path.as_str()))
        );
    }
    // The tag's cluster: mostly Hillmoor images, at the top-left corner where the tag is.
    let tag = clusters
        .iter()
        .find(|c| {
            c.groups.get("hillmoor").copied().unwrap_or(0) * 2 > c.images
                && c.place[0] < 0.2
                && c.place[1] < 0.2
        })
        .expect("a cluster at Hillmoor's tag");
    let html = std::fs::read_to_string(out.join("report.html")).unwrap();
    assert!(html.contains("<h2>Recurring hotspots</h2>") && html.contains("accept-cluster"));
    assert!(
        html.matches("alt=\"hotspot of ").count() >= tag.exemplars.len(),
        "exemplar pictures in the report"
    );

    // Accept it: one command, every image of the cluster, on disk.
    let ledger_dir = images.to_str().unwrap();
    let id = tag.id.to_string();
    let accept = [
        "ledger",
        "accept-cluster",
        "--ledger",
        ledger_dir,
        "--sweep",
        out.to_str().unwrap(),
        "--cluster",
        &id,
    ];
    ok(&spurion(&accept));
    let read_back = || Ledger::open(&Ledger::file_for(&images)).unwrap();
    let l = read_back();
    let label = format!("recurring hotspot {}", tag.id);
    let members: BTreeSet<String> = tag
        .members
        .iter()
        .map(|m| l.key_for(&images.join(&m.path)).unwrap())
        .collect();
    for key in &members {
        let e = l.entry(key).unwrap_or_else(|| panic!("{key} has no entry"));
        assert_eq!(e.verdict, Some(Verdict::Marked), "{key}");
        let boxes: Vec<[f64; 4]> = e
            .drawn
            .iter()
            .filter(|d| d.label == label)
            .map(|d| match d.shape {
                Shape::Rect { bbox } => bbox,
                _ => panic!("a box"),
            })
            .collect();
        let want: Vec<[f64; 4]> = tag
            .members
            .iter()
            .filter(|m| images.join(&m.path) == l.image_path(key))
            .map(|m| m.bbox.map(|v| v as f64))
            .collect();
        assert_eq!(boxes, want, "{key}");
    }
    let others = rows
        .iter()
        .filter(|r| !members.contains(&l.key_for(&images.join(&r.path)).unwrap()))
        .count();
    assert_eq!(
        l.len(),
        members.len(),
        "only the cluster's images were touched ({others} others)"
    );
    // Twice: nothing new.
    let before = std::fs::read_to_string(Ledger::file_for(&images)).unwrap();
    ok(&spurion(&accept));
    let again = read_back();
    for key in &members {
        assert_eq!(
            again.entry(key).unwrap().drawn.len(),
            l.entry(key).unwrap().drawn.len(),
            "{key}"
        );
    }
    let after = std::fs::read_to_string(Ledger::file_for(&images)).unwrap();
    assert_eq!(before, after, "accepting again changes nothing");
    // A cluster that is not there: a clear error, and the ledger as it was.
    let o = spurion(&[
        "ledger",
        "accept-cluster",
        "--ledger",
        ledger_dir,
        "--sweep",
        out.to_str().unwrap(),
        "--cluster",
        "99",
    ]);
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(
        err.contains("no cluster 99") && err.contains("groups.json"),
        "{err}"
    );
}
