//! Where the DICOM reference material lives: fixtures made by tests/reference/pydicom_lut.py
//! (tests/fixtures/dicom), and pydicom's bundled test files, found through the reference Python.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

pub fn fixtures() -> PathBuf {
    crate::common::fixture("dicom")
}

pub fn script() -> PathBuf {
    crate::common::root().join("tests/reference/pydicom_lut.py")
}

/// The reference Python (tests call `crate::common::reference_python()` first, which skips
/// or fails as SPURION_REQUIRE_REFERENCES says when there is none).
pub fn python() -> PathBuf {
    crate::common::reference_python().expect("the reference Python (the test checks it first)")
}

/// Runs the reference script and returns its standard output.
pub fn run_script(args: &[&str]) -> String {
    let out = Command::new(python()).arg(script()).args(args).output().expect("cannot start Python");
    assert!(out.status.success(), "pydicom_lut.py {args:?} failed:\n{}", String::from_utf8_lossy(&out.stderr));
    String::from_utf8(out.stdout).expect("script output is UTF-8")
}

/// pydicom's bundled test files (pydicom.data), `$PYDICOM_TEST_FILES` if set.
pub fn pydicom_files() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| match std::env::var_os("PYDICOM_TEST_FILES") {
        Some(dir) => dir.into(),
        None => PathBuf::from(run_script(&["testdir"]).trim()),
    })
}

/// A pydicom test file by name, or a derived fixture (tests/fixtures/dicom/derived/NAME).
pub fn dicom_path(name: &str, derived: bool) -> PathBuf {
    if derived { fixtures().join("derived").join(name) } else { pydicom_files().join(name) }
}
