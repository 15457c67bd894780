//! DICOM on the command line as a user meets it: a reading of a real test file (pydicom's,
//! from PyPI) writes none of the file's patient-identifying values anywhere unless asked, a
//! damaged file is one clear error, and the demo's DICOM copies read like their PNGs.

use std::path::Path;
use std::process::{Command, Output};

use crate::common::root;
use crate::dicom_reference::{PrivacyFacts, secrets};

fn spurion(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_spurion")).args(args).output().expect("run spurion")
}

/// Every file below `dir`, as bytes and as lossy text.
fn everything_in(dir: &Path) -> Vec<(String, String)> {
    let mut out = vec![];
    for e in std::fs::read_dir(dir).unwrap() {
        let p = e.unwrap().path();
        let bytes = std::fs::read(&p).unwrap();
        out.push((p.display().to_string(), String::from_utf8_lossy(&bytes).into_owned()));
    }
    out
}

#[test]
fn a_reading_of_a_real_dicom_file_writes_no_patient_data_unless_asked() {
    let Some(_) = crate::common::reference_python() else { return };
    // CT_small.dcm (pydicom 3.0.2's bundled test data): 128×128, 16-bit signed CT, with a patient
    // name, IDs, dates and UIDs. The shortcut sample model takes 128×128 grey, so it reads it.
    let text = std::fs::read_to_string(crate::dicom_common::fixtures().join("reference.json")).unwrap();
    let all: serde_json::Value = serde_json::from_str(&text).unwrap();
    let entry = all["files"].as_array().unwrap().iter().find(|f| f["file"] == "CT_small.dcm").unwrap();
    let facts: PrivacyFacts = serde_json::from_value(entry.clone()).unwrap();
    let secrets = secrets(&facts);
    assert!(secrets.len() >= 5, "{secrets:?}");
    let image = crate::dicom_common::dicom_path("CT_small.dcm", false);
    let model = root().join("sample-models/shortcut.onnx");
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("reading");
    let o = spurion(&["explain", "--model", model.to_str().unwrap(), "--image", image.to_str().unwrap(), "--steps", "8", "--out", out.to_str().unwrap()]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let mut places = everything_in(&out);
    places.push(("stdout".into(), String::from_utf8_lossy(&o.stdout).into_owned()));
    places.push(("stderr".into(), String::from_utf8_lossy(&o.stderr).into_owned()));
    for (where_, text) in &places {
        for (k, v) in &secrets {
            assert!(!text.contains(v.as_str()), "{k} = {v:?} of CT_small.dcm leaked into {where_}");
        }
    }
    // What it does say: the file's technical facts and the window it was fed through.
    let r: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(out.join("reading.json")).unwrap()).unwrap();
    assert_eq!(r["source"]["dicom"]["modality"], "CT");
    assert_eq!(r["source"]["dicom"]["bits_stored"], 16);
    assert!(r["source"]["window"]["transform"].is_object());
    assert!(r.get("patient_data").is_none());

    // Asked for, the patient data is there, and the file says why.
    let asked = dir.path().join("asked");
    let o = spurion(&[
        "explain", "--model", model.to_str().unwrap(), "--image", image.to_str().unwrap(), "--steps", "8",
        "--with-patient-data", "--quiet", "--out", asked.to_str().unwrap(),
    ]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let r: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(asked.join("reading.json")).unwrap()).unwrap();
    assert!(r["patient_data"]["note"].as_str().unwrap().contains("--with-patient-data"));
    let name = secrets.iter().find(|(k, _)| k == "PatientName").unwrap();
    assert!(r["patient_data"]["attributes"].as_array().unwrap().iter().any(|a| a["value"].as_str() == Some(name.1.as_str())));
}

#[test]
fn damaged_dicom_files_are_one_clear_error() {
    let Some(_) = crate::common::reference_python() else { return };
    let model = root().join("sample-models/shortcut.onnx");
    // MR_truncated.dcm (pydicom's test data): pixel data cut short.
    let image = crate::dicom_common::dicom_path("MR_truncated.dcm", false);
    let o = spurion(&["explain", "--model", model.to_str().unwrap(), "--image", image.to_str().unwrap(), "--quiet"]);
    assert_eq!(o.status.code(), Some(1));
    let e = String::from_utf8_lossy(&o.stderr);
    assert!(e.contains("MR_truncated.dcm") && e.contains("truncated") && !e.contains("panicked"), "{e}");
    // rtplan.dcm holds no image at all.
    let plan = crate::dicom_common::dicom_path("rtplan.dcm", false);
    let o = spurion(&["feed", "--image", plan.to_str().unwrap(), "--out", "/dev/null"]);
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("no pixel data"), "{}", String::from_utf8_lossy(&o.stderr));
}

#[test]
fn the_demos_dicom_copies_feed_the_model_what_their_pngs_do() {
    // Each copy stores 16 × the PNG's grey values with a window that maps them back onto v/255
    // exactly (src/demo/dicom.rs), so `spurion feed` gives the same pixels (to float rounding)
    // and Hillmoor's copies declare their burned-in text.
    let dir = tempfile::tempdir().unwrap();
    let dicoms = spurion::feed::list_images(&root().join("assets/demo-dicom")).unwrap();
    assert_eq!(dicoms.len(), 6);
    for d in dicoms {
        let npy = dir.path().join("fed.npy");
        let o = spurion(&["feed", "--image", d.to_str().unwrap(), "--out", npy.to_str().unwrap()]);
        assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
        let fed = spurion::feed::read_tensor(&npy).unwrap();
        let png = root().join("assets/demo").join(d.with_extension("png").file_name().unwrap());
        let want = spurion::feed::Picture::open(&png).unwrap().pixels.into_dyn();
        let worst = fed.iter().zip(want.iter()).fold(0f32, |m, (a, b)| m.max((a - b).abs()));
        assert!(worst < 1e-6, "{}: fed pixels differ from the PNG's by {worst}", d.display());
        let pic = spurion::feed::Picture::open(&d).unwrap();
        let hillmoor = d.to_string_lossy().contains("hillmoor");
        assert_eq!(pic.burned_in_annotation(), Some(hillmoor), "{}", d.display());
    }
}

#[test]
fn a_sweep_over_a_real_dicom_file_writes_no_patient_data() {
    let Some(_) = crate::common::reference_python() else { return };
    // CT_small.dcm again (pydicom 3.0.2's test data), swept with a demo DICOM copy beside it:
    // no identifying value in any file the sweep writes (tables, groups, report, thumbnails,
    // cache), nor on the terminal.
    let text = std::fs::read_to_string(crate::dicom_common::fixtures().join("reference.json")).unwrap();
    let all: serde_json::Value = serde_json::from_str(&text).unwrap();
    let entry = all["files"].as_array().unwrap().iter().find(|f| f["file"] == "CT_small.dcm").unwrap();
    // Values of three characters or fewer (CT_small's StudyDescription is "e+1") also occur in
    // any plot's numbers; they prove nothing either way and are left out of this scan.
    let secrets: Vec<(String, String)> =
        secrets(&serde_json::from_value::<PrivacyFacts>(entry.clone()).unwrap()).into_iter().filter(|(_, v)| v.len() > 3).collect();
    assert!(secrets.len() >= 5, "{secrets:?}");
    let dir = tempfile::tempdir().unwrap();
    let images = dir.path().join("images");
    std::fs::create_dir_all(&images).unwrap();
    std::fs::copy(crate::dicom_common::dicom_path("CT_small.dcm", false), images.join("ct.dcm")).unwrap();
    std::fs::copy(root().join("assets/demo-dicom/0005-hillmoor.dcm"), images.join("hillmoor.dcm")).unwrap();
    let out = dir.path().join("out");
    let model = root().join("sample-models/shortcut.onnx");
    let o = spurion(&["sweep", "--model", model.to_str().unwrap(), "--images", images.to_str().unwrap(), "--out", out.to_str().unwrap(), "--method", "gradient"]);
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let mut places = vec![("stdout".to_string(), String::from_utf8_lossy(&o.stdout).into_owned()), ("stderr".into(), String::from_utf8_lossy(&o.stderr).into_owned())];
    let mut stack = vec![out.clone()];
    while let Some(d) = stack.pop() {
        for e in std::fs::read_dir(&d).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                stack.push(p);
            } else {
                places.push((p.display().to_string(), String::from_utf8_lossy(&std::fs::read(&p).unwrap()).into_owned()));
            }
        }
    }
    assert!(places.len() > 10, "the sweep wrote its files");
    for (where_, text) in &places {
        for (k, v) in &secrets {
            assert!(!text.contains(v.as_str()), "{k} = {v:?} of CT_small.dcm leaked into {where_}");
        }
        // The demo copy's invented patient data (DEMO^PHANTOM-…, BIC-…) stays out too.
        assert!(!text.contains("DEMO^PHANTOM") && !text.contains("BIC-"), "demo patient data leaked into {where_}");
    }
    let rows = std::fs::read_to_string(out.join("sweep.jsonl")).unwrap();
    assert!(rows.contains("\"burned_in_annotation\":true"), "Hillmoor's copy declares Burned In Annotation: {rows}");
}
