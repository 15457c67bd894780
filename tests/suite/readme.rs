//! The README's commands, run as written, in order, in a fresh folder holding what a fresh clone
//! holds (issue 26: "every command in the README runs as written, in order, on a fresh clone").
//!
//! Two things differ from a user's terminal, both said here: `--count N` is cut to a few images
//! so that the test stays short, and `sbatch` is a stand-in that runs the job script once per
//! array task, one after another, with the variables Slurm sets for job arrays
//! (SLURM_ARRAY_TASK_ID, _MIN, _COUNT; Slurm's sbatch documentation), since no cluster is at
//! hand here (tests/suite/sweep.rs runs the same script on a real one-node Slurm cluster).

use std::path::Path;
use std::process::Command;

use crate::common::root;

/// The most images a `--count` of the README makes here.
const SMALL_COUNT: usize = 12;

/// The shell commands of the README's `sh` blocks, in order, with `\` continuations joined and
/// comment lines dropped. The set-up block (`cargo run`, `cargo test`) is left out: the test
/// itself is `cargo test`.
fn readme_commands(text: &str) -> Vec<String> {
    let mut commands = vec![];
    let mut lines = text.lines();
    while let Some(line) = lines.next() {
        if line.trim() != "```sh" {
            continue;
        }
        let block: Vec<&str> = lines.by_ref().take_while(|l| l.trim() != "```").collect();
        if block.iter().any(|l| l.trim_start().starts_with("cargo ")) {
            continue;
        }
        let mut current = String::new();
        for l in block {
            let l = l.trim();
            if l.is_empty() || l.starts_with('#') {
                continue;
            }
            match l.strip_suffix('\\') {
                Some(head) => current.push_str(&format!("{} ", head.trim_end())),
                None => {
                    current.push_str(l);
                    commands.push(std::mem::take(&mut current));
                }
            }
        }
        assert!(current.is_empty(), "a README command ends in a continuation: {current}");
    }
    commands
}

/// `--count N` cut to at most [`SMALL_COUNT`].
fn small(command: &str) -> String {
    let mut words: Vec<String> = command.split(' ').map(str::to_string).collect();
    for i in 1..words.len() {
        if words[i - 1] == "--count"
            && let Ok(n) = words[i].parse::<usize>()
        {
            words[i] = n.min(SMALL_COUNT).to_string();
        }
    }
    words.join(" ")
}

fn copy_tree(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let e = e.unwrap();
        let (src, dst) = (e.path(), to.join(e.file_name()));
        if e.file_type().unwrap().is_dir() {
            copy_tree(&src, &dst);
        } else {
            std::fs::copy(&src, &dst).unwrap();
        }
    }
}

const SBATCH_STAND_IN: &str = r#"#!/bin/sh
# Stand-in for Slurm's sbatch (README test): sbatch --array=LO-HI SCRIPT ARGS... runs SCRIPT once
# per array task, one after another, with the variables Slurm sets for job arrays.
case "$1" in --array=*-*) array=${1#--array=}; shift ;; *) echo "sbatch stand-in: give --array=LO-HI first" >&2; exit 2 ;; esac
lo=${array%-*}; hi=${array#*-}
i=$lo
while [ "$i" -le "$hi" ]; do
    SLURM_ARRAY_TASK_ID=$i SLURM_ARRAY_TASK_MIN=$lo SLURM_ARRAY_TASK_COUNT=$((hi - lo + 1)) bash "$@" || exit 1
    i=$((i + 1))
done
"#;

#[test]
fn the_readme_commands_parse_into_whole_commands() {
    let text = "x\n```sh\ncargo run\n```\n```sh\nspurion a --count 200 \\\n        --b 1   # note\n# a comment\nspurion c\n```\n";
    assert_eq!(readme_commands(text), vec!["spurion a --count 200 --b 1   # note", "spurion c"]);
    assert_eq!(small("spurion demo --out o --count 200"), "spurion demo --out o --count 12");
    assert_eq!(small("spurion demo --count 5"), "spurion demo --count 5");
}

#[test]
fn every_readme_command_runs_as_written_in_a_fresh_folder() {
    let readme = std::fs::read_to_string(root().join("README.md")).unwrap();
    // The Python package's install is `.ci/run`'s to run (it installs `./python` into .venv as the
    // README says, then runs python/tests against the same binary); it is left out here.
    let commands: Vec<String> = readme_commands(&readme).into_iter().filter(|c| !c.starts_with("pip install ./python")).collect();
    assert!(readme.contains("pip install ./python"), "the README names the Python package's install");
    // Every command is spurion's (or the cluster's submit), so none can pass by doing nothing.
    for c in &commands {
        assert!(c.starts_with("spurion ") || c.starts_with("sbatch "), "a README command this test does not know: {c}");
    }
    assert!(commands.len() >= 25, "the README's blocks hold {} commands; the parser lost some", commands.len());

    // A fresh clone's files that the commands read (copies: the ledger commands write into
    // assets/demo).
    let dir = tempfile::tempdir().unwrap();
    let here = dir.path();
    for d in ["assets/demo", "assets/demo-dicom", "sample-models", "examples"] {
        copy_tree(&root().join(d), &here.join(d));
    }
    let bin = here.join(".bin");
    std::fs::create_dir_all(&bin).unwrap();
    std::os::unix::fs::symlink(env!("CARGO_BIN_EXE_spurion"), bin.join("spurion")).unwrap();
    std::fs::write(bin.join("sbatch"), SBATCH_STAND_IN).unwrap();
    std::fs::set_permissions(bin.join("sbatch"), std::os::unix::fs::PermissionsExt::from_mode(0o755)).unwrap();
    let path = format!("{}:{}", bin.display(), std::env::var("PATH").unwrap_or_default());

    for c in &commands {
        let c = small(c);
        let o = Command::new("sh")
            .arg("-c")
            .arg(&c)
            .current_dir(here)
            .env("PATH", &path)
            .env_remove("SLURM_ARRAY_TASK_ID")
            .env_remove("JOB_COMPLETION_INDEX")
            .output()
            .expect("run sh");
        assert!(
            o.status.success(),
            "README command failed ({}): {c}\n--- stdout\n{}\n--- stderr\n{}",
            o.status,
            String::from_utf8_lossy(&o.stdout),
            String::from_utf8_lossy(&o.stderr)
        );
    }

    // What the commands say they make is there.
    for f in [
        "out/ig/reading.json",
        "out/ig-black/map.npy",
        "out/x.npy",
        "out/occlusion/reading.json",
        "out/regions",
        "out/demo/manifest.csv",
        "fed.npy",
        "out/dcm/reading.json",
        "out/coop/images",
        "out/sweep/sweep.csv",
        "out/sweep/all/sweep.csv",
        "assets/demo/spurion-ledger.json",
        "verdicts.csv",
        "out/review/review.json",
        "out/sweep-control/groups.json",
        "out/compare/compare.json",
    ] {
        assert!(here.join(f).exists(), "{f} was not made by the README's commands");
    }
    let merged = std::fs::read_to_string(here.join("out/sweep/all/sweep.csv")).unwrap();
    let unsharded = std::fs::read_to_string(here.join("out/sweep/sweep.csv")).unwrap();
    assert_eq!(merged.lines().count(), unsharded.lines().count(), "the merged shards hold the same images as the sweep");
}
