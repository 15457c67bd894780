//! Reading an ONNX file into a typed tract graph with a concrete input shape.
//!
//! Everything here turns a bad file into an error that says which file, what is wrong and what
//! to do; tract's own messages are kept as context underneath.

use std::path::{Component, Path};

use anyhow::{Context, Result, anyhow, bail};
use sha2::{Digest, Sha256};
use tract_onnx::pb;
use tract_onnx::prelude::*;
use tract_onnx::tract_hir::infer::Factoid;
use tract_onnx::tract_core::internal::DimLike;

/// The ONNX file at `path` as its protobuf message, and the file's sha256.
pub(crate) fn read(path: &Path) -> Result<(pb::ModelProto, String)> {
    let bytes = std::fs::read(path).with_context(|| {
        format!("cannot read the model file {}: check the path and permissions", path.display())
    })?;
    if bytes.is_empty() {
        bail!("the model file {} is empty: export the ONNX model again", path.display());
    }
    let sha256 = hex(&Sha256::digest(&bytes));
    let proto = tract_onnx::onnx().proto_model_for_read(&mut &bytes[..]).map_err(|e| {
        anyhow!(
            "the model file {} is not a readable ONNX model (corrupt or truncated: {e}); \
             export it again or check the download",
            path.display()
        )
    })?;
    Ok((proto, sha256))
}

/// The sha256 of a model held in memory: of its protobuf encoding.
pub(crate) fn proto_sha256(proto: &pb::ModelProto) -> String {
    use prost::Message;
    hex(&Sha256::digest(proto.encode_to_vec()))
}

/// A protobuf model as tract's inference graph; `path` is where it came from (external data is
/// looked for beside it, and errors name it).
pub(crate) fn parse_proto(path: &Path, proto: &pb::ModelProto) -> Result<InferenceModel> {
    let onnx = tract_onnx::onnx();
    let graph = proto.graph.as_ref().ok_or_else(|| {
        anyhow!(
            "the model file {} holds no graph (corrupt, truncated or not ONNX); export it again",
            path.display()
        )
    })?;
    if graph.node.is_empty() || graph.input.is_empty() {
        bail!(
            "the model file {} holds an empty graph (no nodes or no inputs); \
             it is probably truncated or not an ONNX model",
            path.display()
        );
    }
    let dir = path.parent().unwrap_or(Path::new("."));
    check_external_data(path, dir, graph)?;
    let dir_str = dir.to_str().map(|s| if s.is_empty() { "." } else { s });
    let parsed = onnx.parse(proto, dir_str).map_err(|e| {
        anyhow!(
            "tract could not read the graph in {}: {e:#}. The file may be truncated, or use an \
             operator tract does not know",
            path.display()
        )
    })?;
    if !parsed.unresolved_inputs.is_empty() {
        bail!(
            "the model file {} refers to values nobody produces: {:?}; the export is broken",
            path.display(),
            parsed.unresolved_inputs
        );
    }
    Ok(parsed.model)
}

/// External tensor data must live inside the model's own folder: a path that climbs out (or is
/// absolute, or a link that resolves outside) could make spurion read any file on the machine.
fn check_external_data(path: &Path, dir: &Path, graph: &pb::GraphProto) -> Result<()> {
    let mut tensors: Vec<&pb::TensorProto> = graph.initializer.iter().collect();
    let mut graphs = vec![graph];
    while let Some(g) = graphs.pop() {
        for node in &g.node {
            for attr in &node.attribute {
                tensors.extend(attr.t.iter());
                tensors.extend(attr.tensors.iter());
                graphs.extend(attr.g.iter());
                graphs.extend(attr.graphs.iter());
            }
        }
        if !std::ptr::eq(g, graph) {
            tensors.extend(g.initializer.iter());
        }
    }
    for t in tensors {
        let Some(loc) = t.external_data.iter().find(|e| e.key == "location") else { continue };
        let location = Path::new(&loc.value);
        let climbs = location
            .components()
            .any(|c| !matches!(c, Component::Normal(_) | Component::CurDir));
        let escapes = || -> bool {
            let Ok(base) = std::fs::canonicalize(if dir.as_os_str().is_empty() { Path::new(".") } else { dir }) else {
                return true;
            };
            match std::fs::canonicalize(base.join(location)) {
                Ok(full) => !full.starts_with(&base),
                Err(_) => false, // missing file: reported below with its own message
            }
        };
        if climbs || escapes() {
            bail!(
                "the model file {} keeps tensor '{}' in external data at '{}', which is outside \
                 the model's folder; spurion refuses to read it. Put the data file next to the \
                 model and store a plain relative file name",
                path.display(),
                t.name,
                loc.value
            );
        }
        if !dir.join(location).exists() {
            bail!(
                "the model file {} keeps tensor '{}' in external data '{}', which is missing; \
                 copy the data file next to the model",
                path.display(),
                t.name,
                loc.value
            );
        }
    }
    Ok(())
}

/// The one input of a classifier's graph, or an error saying spurion takes one image input.
fn the_input<'m>(path: &Path, model: &'m InferenceModel) -> Result<&'m InferenceFact> {
    if model.inputs.len() != 1 {
        bail!(
            "the model {} has {} inputs; spurion handles classifiers with exactly one image input",
            path.display(),
            model.inputs.len()
        );
    }
    model.input_fact(0).map_err(|e| anyhow!("{e}"))
}

/// The input dimensions the graph of `path` fixes (`None` where it leaves one open), read
/// without typing the graph.
pub fn input_dims(path: &Path) -> Result<Vec<Option<usize>>> {
    let model = parse_proto(path, &read(path)?.0)?;
    let fact = the_input(path, &model)?;
    if fact.shape.is_open() {
        bail!("the model {} does not say its input's rank; give its input shape (for example 1,3,224,224)", path.display());
    }
    Ok(fact.shape.dims().map(|d| d.concretize().and_then(|t| t.to_usize().ok()).filter(|&v| v > 0)).collect())
}

/// Picks the concrete input shape: the caller's, else the graph's with a free batch axis set to 1.
pub(crate) fn concrete_input_shape(
    path: &Path,
    model: &InferenceModel,
    wanted: Option<&[usize]>,
) -> Result<Vec<usize>> {
    let fact = the_input(path, model)?;
    if let Some(dt) = fact.datum_type.concretize() {
        if dt != f32::datum_type() {
            bail!(
                "the model {} takes {dt:?} input; spurion feeds float32 tensors only",
                path.display()
            );
        }
    }
    let graph_dims: Option<Vec<Option<usize>>> = if fact.shape.is_open() {
        None
    } else {
        Some(
            fact.shape
                .dims()
                .map(|d| d.concretize().and_then(|t| t.to_usize().ok()).filter(|&v| v > 0))
                .collect(),
        )
    };
    if let Some(w) = wanted {
        if w.first() != Some(&1) {
            bail!("the input shape {w:?} given for {} must have batch 1 first", path.display());
        }
        if let Some(g) = &graph_dims {
            if g.len() != w.len() {
                bail!(
                    "the input shape {w:?} given for {} has rank {}, the graph expects rank {}",
                    path.display(),
                    w.len(),
                    g.len()
                );
            }
            for (ax, (gd, wd)) in g.iter().zip(w).enumerate() {
                if let Some(gd) = gd {
                    if gd != wd && ax != 0 {
                        bail!(
                            "the input shape {w:?} given for {} disagrees with the graph's fixed \
                             size {gd} on axis {ax}",
                            path.display()
                        );
                    }
                }
            }
        }
        return Ok(w.to_vec());
    }
    let Some(g) = graph_dims else {
        bail!(
            "the model {} does not say its input shape; give it (for example 1,3,224,224)",
            path.display()
        );
    };
    let mut shape = Vec::with_capacity(g.len());
    for (ax, d) in g.iter().enumerate() {
        match (ax, d) {
            (_, Some(v)) => shape.push(*v),
            (0, None) => shape.push(1),
            (_, None) => bail!(
                "the model {} has a dynamic input size on axis {ax} ({}) and nothing given fixes it: \
                 pass --input-shape (for example 1,3,224,224), write a feed card with its height and \
                 width, or feed an image or tensor whose size the model accepts",
                path.display(),
                fact.format_dt_shape()
            ),
        }
    }
    if shape.first() != Some(&1) {
        bail!(
            "the model {} has a fixed batch of {} on its input; spurion needs batch 1 (re-export \
             with a dynamic or unit batch)",
            path.display(),
            shape[0]
        );
    }
    Ok(shape)
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}
