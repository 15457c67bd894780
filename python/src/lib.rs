//! spurion's engine for Python. This module is the thin native layer; the package's Python
//! code (`spurion/__init__.py`) gives it the names a Python user expects.
//!
//! Every call goes through the command line's own code: options arrive as the command's flags
//! and are parsed by its parser, so the defaults, the checks and the error messages are the
//! same, and the same image and request give the same map bit for bit. Long calls run on a
//! worker thread with the GIL released; the calling thread polls for Ctrl-C (KeyboardInterrupt
//! cancels the work through its `Control`) and hands progress to a Python callback.

use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use anyhow::{Context, Result, bail};
use clap::Parser;
use ndarray::{Array3, ArrayD, IxDyn};
use pyo3::exceptions::{PyKeyboardInterrupt, PyRuntimeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyBytes;

use spurion::cli::{Cli, Command, ModelArgs, ModelHow};
use spurion::control::Control;
use spurion::feed::{FeedCard, Picture};
use spurion::methods::Input;
use spurion::model::{Model, Tap};

pyo3::create_exception!(_engine, SpurionError, pyo3::exceptions::PyException, "An error spurion reports: which file, what is wrong, what to do.");

/// The CLI's one-paragraph message: the error and its causes, joined as the binary prints them.
fn message(e: &anyhow::Error) -> String {
    let mut s = e.to_string();
    for c in e.chain().skip(1) {
        s.push_str(": ");
        s.push_str(&c.to_string());
    }
    s
}

fn to_py(e: anyhow::Error) -> PyErr {
    if spurion::model::is_cancelled(&e) {
        return PyKeyboardInterrupt::new_err("cancelled");
    }
    SpurionError::new_err(message(&e))
}

/// Parses a command line the way the binary does; a usage error becomes a ValueError with
/// clap's own text.
fn parse(argv: Vec<String>) -> PyResult<Command> {
    let cli = Cli::try_parse_from(std::iter::once("spurion".to_string()).chain(argv))
        .map_err(|e| PyValueError::new_err(e.render().to_string()))?;
    cli.command.ok_or_else(|| PyValueError::new_err("no command"))
}

/// Runs `job` on a worker thread without the GIL. Every 50 ms the calling thread checks for
/// Ctrl-C (then cancels and waits for the worker to stop) and reports progress to `progress`
/// (called as `progress(done, total)` whenever it changed).
fn run_released<T: Send>(py: Python<'_>, progress: Option<Py<PyAny>>, job: impl FnOnce(&Control) -> Result<T> + Send) -> PyResult<T> {
    let ctl = Control::new();
    std::thread::scope(|s| {
        let worker_ctl = ctl.clone();
        let handle = s.spawn(move || job(&worker_ctl));
        let mut last = (u64::MAX, u64::MAX);
        loop {
            let done = py.detach(|| {
                // Wake early when the worker ends.
                for _ in 0..10 {
                    if handle.is_finished() {
                        return true;
                    }
                    std::thread::sleep(Duration::from_millis(5));
                }
                handle.is_finished()
            });
            if let Err(interrupt) = py.check_signals() {
                ctl.cancel();
                let _ = py.detach(|| handle.join());
                return Err(interrupt);
            }
            if let Some(cb) = &progress {
                let now = ctl.progress();
                if now != last && now.1 > 0 {
                    last = now;
                    if let Err(e) = cb.call1(py, now) {
                        ctl.cancel();
                        let _ = py.detach(|| handle.join());
                        return Err(e);
                    }
                }
            }
            if done {
                break;
            }
        }
        match handle.join() {
            Ok(r) => r.map_err(to_py),
            Err(_) => Err(PyRuntimeError::new_err("spurion's worker thread panicked; please report this with the input that caused it")),
        }
    })
}

/// An array handed over from Python: its raw little-endian bytes, shape and dtype name.
struct Samples {
    bytes: Vec<u8>,
    shape: Vec<usize>,
    dtype: String,
}

impl Samples {
    fn floats(&self) -> Result<Vec<f32>> {
        match self.dtype.as_str() {
            "float32" => Ok(self.bytes.chunks_exact(4).map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]])).collect()),
            "float64" => Ok(self.bytes.chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().unwrap()) as f32).collect()),
            d => bail!("a float array was expected, not {d}"),
        }
    }

    /// The tensor, fed exactly as given (as `--tensor FILE.npy` is).
    fn tensor(&self) -> Result<ArrayD<f32>> {
        Ok(ArrayD::from_shape_vec(IxDyn(&self.shape), self.floats()?)?)
    }

    /// The picture, decoded as a file of the same samples is: 8-bit values over 255, 16-bit
    /// values through the feed card's window (all values by default, as a 16-bit PNG), floats
    /// clamped to 0..1.
    fn picture(&self, card: &FeedCard) -> Result<Picture> {
        let (h, w, c) = match self.shape[..] {
            [h, w] => (h, w, 1),
            [h, w, c @ (1 | 3 | 4)] => (h, w, c),
            _ => bail!("an image array is H×W or H×W×C with C 1, 3 or 4; this one is shaped {:?}", self.shape),
        };
        if h == 0 || w == 0 {
            bail!("the image array is empty (shape {:?})", self.shape);
        }
        match self.dtype.as_str() {
            "uint8" | "uint16" => {
                let png = encode_png(&self.bytes, h, w, c, self.dtype == "uint16")?;
                Picture::decode_with_window(&png, card.input.window.as_ref())
            }
            "float32" | "float64" => {
                let v = self.floats()?;
                if v.iter().any(|x| !x.is_finite()) {
                    bail!("the image array holds NaN or infinite values");
                }
                // Alpha is dropped, as decoding an RGBA file does.
                let keep = if c == 4 { 3 } else { c };
                let px = Array3::from_shape_fn((h, w, keep), |(y, x, k)| v[(y * w + x) * c + k].clamp(0.0, 1.0));
                Ok(Picture::new(px, 32))
            }
            d => bail!("image arrays are uint8, uint16, float32 or float64, not {d}"),
        }
    }
}

/// PNG bytes of 8- or 16-bit samples (little-endian in, as numpy hands them over).
fn encode_png(bytes: &[u8], h: usize, w: usize, c: usize, sixteen: bool) -> Result<Vec<u8>> {
    use image::{ExtendedColorType, ImageEncoder, codecs::png::PngEncoder};
    let colour = match (c, sixteen) {
        (1, false) => ExtendedColorType::L8,
        (3, false) => ExtendedColorType::Rgb8,
        (4, false) => ExtendedColorType::Rgba8,
        (1, true) => ExtendedColorType::L16,
        (3, true) => ExtendedColorType::Rgb16,
        (4, true) => ExtendedColorType::Rgba16,
        _ => bail!("{c} channels"),
    };
    // PNG stores 16-bit samples big-endian.
    let data: Vec<u8> = if sixteen { bytes.chunks_exact(2).flat_map(|p| [p[1], p[0]]).collect() } else { bytes.to_vec() };
    let mut out = Vec::new();
    PngEncoder::new(&mut out).write_image(&data, w as u32, h as u32, colour).context("cannot encode the image array")?;
    Ok(out)
}

/// A model and how to feed it: the ONNX file, its feed card (the sidecar unless one is named)
/// and an input shape for dynamic dimensions.
#[pyclass(module = "spurion._engine", frozen)]
struct ModelHandle {
    args: ModelArgs,
    /// Loaded once where the graph's shape is fixed; models with dynamic dimensions are loaded
    /// for each input, as the command line does.
    fixed: Option<Arc<Model>>,
}

impl ModelHandle {
    fn model_for(&self, image: Option<&PathBuf>, tensor_shape: Option<&[usize]>) -> Result<Arc<Model>> {
        if let Some(m) = &self.fixed {
            return Ok(m.clone());
        }
        let mut args = self.args.clone();
        if args.how.input_shape.is_none() {
            args.how.input_shape = tensor_shape.map(<[usize]>::to_vec);
        }
        let input = spurion::cli::InputArgs { image: image.cloned(), tensor: None, frame: 0 };
        Ok(Arc::new(args.load_for(&input)?))
    }

    /// The model and the input for an array: a tensor exactly as given, or an image fed
    /// through the feed card.
    fn input_of(&self, kind: &str, s: &Samples) -> Result<(Arc<Model>, Input, Option<FeedCard>)> {
        match kind {
            "tensor" => {
                let x = s.tensor()?;
                let model = self.model_for(None, Some(x.shape()))?;
                if x.shape() != model.input_shape() {
                    bail!(
                        "the tensor has shape {:?} but model {} takes {:?}; pass an image (H×W or H×W×C) to have it fed \
                         through the feed card, or reshape the tensor",
                        x.shape(),
                        model.path().display(),
                        model.input_shape()
                    );
                }
                let card = self.args.card(&model).ok();
                Ok((model, Input::tensor(x, "array"), card))
            }
            _ => {
                let model = match &self.fixed {
                    Some(m) => m.clone(),
                    None => {
                        // A dynamic model takes the image's own size, as for a file.
                        let (h, w) = (s.shape[0], s.shape[1]);
                        let dims = spurion::model::input_dims(&self.args.model)?;
                        let mut args = self.args.clone();
                        if args.how.input_shape.is_none() && dims.len() == 4 {
                            let fill = |d: Option<usize>, v: usize| d.unwrap_or(v);
                            args.how.input_shape = match (dims[1], dims[3]) {
                                (Some(c @ (1 | 3)), _) => Some(vec![1, c, fill(dims[2], h), fill(dims[3], w)]),
                                (_, Some(c @ (1 | 3))) => Some(vec![1, fill(dims[1], h), fill(dims[2], w), c]),
                                _ => None,
                            };
                        }
                        Arc::new(args.load()?)
                    }
                };
                let card = self.args.card(&model)?;
                let pic = s.picture(&card)?;
                let input = Input::picture(pic, &card).context("the image array")?;
                Ok((model, input, Some(card)))
            }
        }
    }
}

#[pymethods]
impl ModelHandle {
    #[new]
    #[pyo3(signature = (path, feed=None, input_shape=None, output=None))]
    fn new(py: Python<'_>, path: PathBuf, feed: Option<PathBuf>, input_shape: Option<Vec<usize>>, output: Option<String>) -> PyResult<Self> {
        let args = ModelArgs { model: path, how: ModelHow { input_shape, feed, output } };
        py.detach(|| -> Result<ModelHandle> {
            let dims = spurion::model::input_dims(&args.model)?;
            let fixed = if args.how.input_shape.is_some() || dims.iter().skip(1).all(Option::is_some) || args.card_path().is_some() {
                let m = args.load()?;
                // A named card is checked now, so a wrong one fails at once.
                args.card(&m)?;
                Some(Arc::new(m))
            } else {
                None
            };
            Ok(ModelHandle { args, fixed })
        })
        .map_err(to_py)
    }

    /// `spurion info --json` for this model.
    fn info_json(&self, py: Python<'_>) -> PyResult<String> {
        let m = py.detach(|| self.model_for(None, None)).map_err(to_py)?;
        serde_json::to_string(&m.info()).map_err(|e| to_py(e.into()))
    }

    /// The feed card in use, as JSON (the named one, the sidecar, or one inferred from the graph).
    fn card_json(&self, py: Python<'_>) -> PyResult<String> {
        py.detach(|| -> Result<String> {
            let m = self.model_for(None, None)?;
            Ok(serde_json::to_string(&self.args.card(&m)?)?)
        })
        .map_err(to_py)
    }

    /// Raw outputs for a file (path) or an array: (values, labels).
    fn predict(&self, py: Python<'_>, kind: &str, path: Option<PathBuf>, bytes: Option<Vec<u8>>, shape: Option<Vec<usize>>, dtype: Option<String>) -> PyResult<(Vec<f32>, Vec<String>)> {
        py.detach(|| -> Result<(Vec<f32>, Vec<String>)> {
            let (model, input, card) = match path {
                Some(p) => {
                    let ia = spurion::cli::InputArgs { image: Some(p), tensor: None, frame: 0 };
                    let model = Arc::new(self.args.load_for(&ia)?);
                    let (input, card) = spurion::cli::load_input(&model, &self.args, &ia)?;
                    (model, input, card)
                }
                None => {
                    let s = Samples { bytes: bytes.unwrap_or_default(), shape: shape.unwrap_or_default(), dtype: dtype.unwrap_or_default() };
                    self.input_of(kind, &s)?
                }
            };
            let out = model.forward(&input.model_tensor()?, Tap::Output)?;
            let labels = (0..out.len()).map(|i| card.as_ref().map(|c| c.label(i)).unwrap_or_else(|| format!("class {i}"))).collect();
            Ok((out.to_vec(), labels))
        })
        .map_err(to_py)
    }

    #[getter]
    fn path(&self) -> PathBuf {
        self.args.model.clone()
    }
}

/// One reading. `argv` are `spurion explain`'s flags (method, baseline, steps, ...); the input
/// is a file (`path`) or an array. Returns (reading.json text, map bytes as float32, map shape).
#[pyfunction]
#[pyo3(signature = (model, argv, path=None, kind="image", bytes=None, shape=None, dtype=None, progress=None))]
#[allow(clippy::too_many_arguments)]
fn explain<'py>(
    py: Python<'py>,
    model: &ModelHandle,
    argv: Vec<String>,
    path: Option<PathBuf>,
    kind: &str,
    bytes: Option<Vec<u8>>,
    shape: Option<Vec<usize>>,
    dtype: Option<String>,
    progress: Option<Py<PyAny>>,
) -> PyResult<(String, Bound<'py, PyBytes>, Vec<usize>)> {
    // The flags are parsed as the command line parses them; the model and input come from here.
    let mut full = vec!["explain".to_string(), "--model".into(), model.args.model.display().to_string()];
    if let Some(f) = &model.args.how.feed {
        full.extend(["--feed".into(), f.display().to_string()]);
    }
    if let Some(s) = &model.args.how.input_shape {
        full.extend(["--input-shape".into(), s.iter().map(usize::to_string).collect::<Vec<_>>().join(",")]);
    }
    if let Some(o) = &model.args.how.output {
        full.extend(["--output".into(), o.clone()]);
    }
    match &path {
        Some(p) => full.extend(["--image".into(), p.display().to_string()]),
        // The parser wants an input; the array replaces it below.
        None => full.extend(["--tensor".into(), "array.npy".into()]),
    }
    full.extend(argv);
    let Command::Explain(args) = parse(full)? else { unreachable!("explain parses as explain") };
    // A bad option value is the caller's mistake, told before any work (as the command does).
    args.reading.request().map_err(|e| PyValueError::new_err(message(&e)))?;
    let samples = bytes.map(|b| Samples { bytes: b, shape: shape.unwrap_or_default(), dtype: dtype.unwrap_or_default() });
    let kind = kind.to_string();
    let (json, map) = run_released(py, progress, |ctl| -> Result<(String, ArrayD<f32>)> {
        let e = match &samples {
            None => spurion::cli::explain::compute(&args, ctl)?,
            Some(s) => {
                let (model, input, card) = model.input_of(&kind, s)?;
                let req = args.reading.request()?;
                let drawn = spurion::cli::explain::drawn_regions(&args, &input)?;
                spurion::cli::explain::compute_on(&model, card.as_ref(), input, drawn, &req, ctl)?
            }
        };
        if let Some(out) = &args.out {
            spurion::cli::explain::write_files(&args, &e, out)?;
        }
        let json = serde_json::to_string_pretty(&spurion::cli::explain::reading_json(&e, args.with_patient_data)?)?;
        Ok((json, e.reading.map.clone()))
    })?;
    let shape = map.shape().to_vec();
    let flat: Vec<u8> = map.iter().flat_map(|v| v.to_le_bytes()).collect();
    Ok((json, PyBytes::new(py, &flat), shape))
}

/// `spurion sweep` with these flags (they include --images and --out); returns the output folder.
#[pyfunction]
#[pyo3(signature = (argv, progress=None))]
fn sweep(py: Python<'_>, argv: Vec<String>, progress: Option<Py<PyAny>>) -> PyResult<PathBuf> {
    let mut full = vec!["sweep".to_string(), "--quiet".into()];
    full.extend(argv);
    let Command::Sweep(args) = parse(full)? else { unreachable!("sweep parses as sweep") };
    run_released(py, progress, |ctl| spurion::cli::sweep::run_with(&args, ctl).map(|_| args.out.clone()))
}

/// `spurion review` with these flags (they include --model, --image and --out); returns the
/// output folder.
#[pyfunction]
#[pyo3(signature = (argv, progress=None))]
fn review(py: Python<'_>, argv: Vec<String>, progress: Option<Py<PyAny>>) -> PyResult<PathBuf> {
    let mut full = vec!["review".to_string(), "--quiet".into()];
    full.extend(argv);
    let Command::Review(args) = parse(full)? else { unreachable!("review parses as review") };
    run_released(py, progress, |ctl| spurion::cli::review::run_with(&args, ctl))
}

/// `spurion ledger set` with these flags; returns the line the command prints once the change
/// is on disk.
#[pyfunction]
fn ledger_set(py: Python<'_>, argv: Vec<String>) -> PyResult<String> {
    let mut full = vec!["ledger".to_string(), "set".into()];
    full.extend(argv);
    let Command::Ledger(args) = parse(full)? else { unreachable!("ledger parses as ledger") };
    let spurion::cli::ledger::LedgerCommand::Set(set) = &args.command else { unreachable!("ledger set parses as set") };
    py.detach(|| spurion::cli::ledger::set_verdict(set)).map_err(to_py)
}

/// The ledger's own JSON form (`spurion ledger show --json`), or None where no file exists yet.
#[pyfunction]
fn ledger_json(py: Python<'_>, path: PathBuf) -> PyResult<Option<String>> {
    py.detach(|| -> Result<Option<String>> {
        let file = spurion::ledger::Ledger::file_for(&path);
        match spurion::ledger::load(&file)? {
            Some(l) => Ok(Some(l.to_json()?)),
            None => Ok(None),
        }
    })
    .map_err(to_py)
}

/// The ledger as CSV (`spurion ledger export`).
#[pyfunction]
fn ledger_csv(py: Python<'_>, path: PathBuf) -> PyResult<String> {
    py.detach(|| -> Result<String> {
        let ledger = spurion::ledger::Ledger::open(&spurion::ledger::Ledger::file_for(&path))?;
        let mut out = Vec::new();
        spurion::ledger::write_csv(&ledger, &mut out)?;
        Ok(String::from_utf8(out)?)
    })
    .map_err(to_py)
}

/// The image's key in the ledger (its path relative to the ledger's root).
#[pyfunction]
fn ledger_key(py: Python<'_>, path: PathBuf, image: PathBuf) -> PyResult<String> {
    py.detach(|| -> Result<String> {
        let file = spurion::ledger::Ledger::file_for(&path);
        let ledger = match spurion::ledger::load(&file)? {
            Some(l) => l,
            None => spurion::ledger::Ledger::new(&file, None)?,
        };
        ledger.key_for(&image)
    })
    .map_err(to_py)
}

#[pymodule]
fn _engine(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("SpurionError", m.py().get_type::<SpurionError>())?;
    m.add("CAUTION", spurion::CAUTION)?;
    m.add("VERSION", env!("CARGO_PKG_VERSION"))?;
    m.add_class::<ModelHandle>()?;
    m.add_function(wrap_pyfunction!(explain, m)?)?;
    m.add_function(wrap_pyfunction!(sweep, m)?)?;
    m.add_function(wrap_pyfunction!(review, m)?)?;
    m.add_function(wrap_pyfunction!(ledger_set, m)?)?;
    m.add_function(wrap_pyfunction!(ledger_json, m)?)?;
    m.add_function(wrap_pyfunction!(ledger_csv, m)?)?;
    m.add_function(wrap_pyfunction!(ledger_key, m)?)?;
    Ok(())
}
