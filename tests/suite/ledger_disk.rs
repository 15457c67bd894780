//! The ledger on a real full disk and a real read-only folder: a small tmpfs, filled up, then
//! remounted read-only. Needs `mount` (root, or a container that allows it); where it is not
//! allowed the test says so and skips. The failing-writer unit tests in src/ledger/tests.rs
//! cover the same promises everywhere.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use spurion::ledger::{Change, Ledger, Store, Verdict};

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().expect("run spurion")
}

/// A tmpfs mounted on a folder, unmounted when dropped.
struct Tmpfs(PathBuf);

impl Tmpfs {
    /// Mounts one, or says why it cannot.
    fn mount(on: &Path, size: &str) -> Result<Tmpfs, String> {
        let o = Command::new("mount")
            .args(["-t", "tmpfs", "-o", &format!("size={size},mode=0755"), "tmpfs"])
            .arg(on)
            .output()
            .map_err(|e| format!("cannot run mount: {e}"))?;
        if !o.status.success() {
            return Err(format!("mount -t tmpfs failed: {}", String::from_utf8_lossy(&o.stderr).trim()));
        }
        Ok(Tmpfs(on.to_path_buf()))
    }

    fn remount(&self, how: &str) {
        let st = Command::new("mount").args(["-o", &format!("remount,{how}")]).arg(&self.0).status().unwrap();
        assert!(st.success(), "mount -o remount,{how} failed");
    }
}

impl Drop for Tmpfs {
    fn drop(&mut self) {
        Command::new("umount").arg("-l").arg(&self.0).status().ok();
    }
}

fn mounted(dir: &tempfile::TempDir, size: &str) -> Option<Tmpfs> {
    match Tmpfs::mount(dir.path(), size) {
        Ok(m) => Some(m),
        Err(why) => {
            eprintln!(
                "SKIPPED: no tmpfs can be mounted here ({why}); the failing-writer unit tests in \
                 src/ledger/tests.rs cover a full disk and a read-only folder without one"
            );
            None
        }
    }
}

fn set(ledger: &Path, image: &Path, verdict: &str) -> Output {
    spurion(&["ledger", "set", "--ledger", ledger.to_str().unwrap(), "--image", image.to_str().unwrap(), "--verdict", verdict])
}

/// Fills the file system of `dir` up to the last byte it will take.
fn fill(dir: &Path) -> PathBuf {
    let p = dir.join("filler");
    let mut f = std::fs::File::create(&p).unwrap();
    let chunk = vec![7u8; 4096];
    while f.write_all(&chunk).is_ok() {}
    while f.write_all(&chunk[..1]).is_ok() {}
    p
}

#[test]
fn a_full_disk_is_told_loses_no_verdict_and_saving_resumes_when_there_is_room() {
    let dir = tempfile::tempdir().unwrap();
    let Some(_fs) = mounted(&dir, "256k") else { return };
    let (a, b, c) = (dir.path().join("a.png"), dir.path().join("b.png"), dir.path().join("c.png"));
    for p in [&a, &b, &c] {
        std::fs::write(p, b"x").unwrap();
    }
    let ledger = dir.path().join("spurion-ledger.json");
    assert!(set(&ledger, &a, "marked").status.success());
    let filler = fill(dir.path());

    // The command line: exit 1, says the disk is full and that nothing was saved; the ledger
    // is as it was.
    let o = set(&ledger, &b, "clean");
    let e = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{e}");
    for says in ["disk is full", "NOT saved", ledger.to_str().unwrap()] {
        assert!(e.contains(says), "lacks {says:?}: {e}");
    }
    let disk = Ledger::open(&ledger).unwrap();
    assert_eq!((disk.verdict("a.png"), disk.verdict("b.png")), (Some(Verdict::Marked), None));
    assert!(!spurion::ledger::file::temp_path(&ledger).exists(), "a failed write leaves no temporary file holding space");

    // A front end's store: the verdict is kept in memory with the reason, saved once there is room.
    let mut store = Store::open(&ledger).unwrap();
    store.change(Change::verdict("c.png", Some(Verdict::Exclude))).unwrap();
    let p = store.pending().expect("not saved on a full disk");
    assert!(p.message().contains("disk is full") && p.message().contains("c.png"), "{}", p.message());
    assert_eq!(store.ledger().verdict("c.png"), Some(Verdict::Exclude));
    std::fs::remove_file(filler).unwrap();
    store.retry().unwrap();
    assert_eq!(Ledger::open(&ledger).unwrap().verdict("c.png"), Some(Verdict::Exclude));
    assert!(set(&ledger, &b, "clean").status.success());
    let disk = Ledger::open(&ledger).unwrap();
    assert_eq!((disk.verdict("a.png"), disk.verdict("b.png"), disk.verdict("c.png")), (Some(Verdict::Marked), Some(Verdict::Clean), Some(Verdict::Exclude)));
}

#[test]
fn a_read_only_folder_is_told_loses_no_verdict_and_saving_resumes_when_writable() {
    let dir = tempfile::tempdir().unwrap();
    let Some(fs) = mounted(&dir, "1m") else { return };
    let (a, b) = (dir.path().join("a.png"), dir.path().join("b.png"));
    std::fs::write(&a, b"x").unwrap();
    std::fs::write(&b, b"x").unwrap();
    let ledger = dir.path().join("spurion-ledger.json");
    assert!(set(&ledger, &a, "unsure").status.success());
    let mut store = Store::open(&ledger).unwrap();
    // Read-only for everyone, root included (chmod would not stop root).
    fs.remount("ro");

    let o = set(&ledger, &b, "marked");
    let e = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(1), "{e}");
    for says in ["read-only file system", "NOT saved", ledger.to_str().unwrap()] {
        assert!(e.contains(says), "lacks {says:?}: {e}");
    }
    // Reading still works.
    let o = spurion(&["ledger", "show", "--ledger", ledger.to_str().unwrap()]);
    assert!(o.status.success() && String::from_utf8_lossy(&o.stdout).contains("a.png"));

    store.change(Change::verdict("b.png", Some(Verdict::Marked))).unwrap();
    let p = store.pending().expect("not saved in a read-only folder");
    assert!(p.message().contains("read-only"), "{}", p.message());
    assert!(store.retry().is_err());
    fs.remount("rw");
    store.retry().unwrap();
    let disk = Ledger::open(&ledger).unwrap();
    assert_eq!((disk.verdict("a.png"), disk.verdict("b.png")), (Some(Verdict::Unsure), Some(Verdict::Marked)));
}
