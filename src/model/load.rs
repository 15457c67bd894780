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
    parse_proto_with(path, proto, false)
}

/// As [`parse_proto`]; `without_declared_shapes` ignores the shapes the file declares for its
/// outputs and intermediate values (`value_info`). Some exporters declare them in terms of a
/// named batch symbol (PaddlePaddle's `DynamicDimension.0`) that tract will not unify with the
/// batch of 1 spurion feeds; tract works the shapes out from the input without them.
pub(crate) fn parse_proto_with(path: &Path, proto: &pb::ModelProto, without_declared_shapes: bool) -> Result<InferenceModel> {
    let onnx = tract_onnx::onnx()
        .with_ignore_value_info(without_declared_shapes)
        .with_ignore_output_shapes(without_declared_shapes);
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

/// One output of the typed graph: where it is, its name and shape, whether it holds float32.
pub(crate) struct GraphOutput {
    pub outlet: OutletId,
    pub info: super::TensorInfo,
    pub f32: bool,
}

/// The graph's outputs in order, named as in the ONNX file.
pub(crate) fn graph_outputs(g: &TypedModel) -> Result<Vec<GraphOutput>> {
    g.output_outlets()?
        .iter()
        .map(|&o| {
            let fact = g.outlet_fact(o)?;
            Ok(GraphOutput {
                outlet: o,
                info: super::TensorInfo {
                    name: g.outlet_label(o).map(str::to_string).unwrap_or_else(|| g.node(o.node).name.clone()),
                    shape: fact.shape.as_concrete().map(|s| s.to_vec()).unwrap_or_default(),
                },
                f32: fact.datum_type == f32::datum_type(),
            })
        })
        .collect()
}

/// Whether a shape holds one score per class for one image: [1, C] or [C], C ≥ 2.
fn class_shaped(shape: &[usize]) -> bool {
    match shape {
        [1, c] | [c] => *c >= 2,
        _ => false,
    }
}

/// The output methods score: the one named in `opts`, else the only one, else the only float32
/// output shaped like class scores ([1, C], with C the feed card's label count when it gives
/// labels). Anything else is refused with the outputs listed and the ways to choose one: an
/// intermediate tensor is never scored silently.
pub(crate) fn scored_output(
    path: &Path,
    g: &TypedModel,
    outputs: &[GraphOutput],
    opts: &super::LoadOptions,
) -> Result<(OutletId, String)> {
    let list = || {
        outputs
            .iter()
            .map(|o| format!("'{}' {:?}{}", o.info.name, o.info.shape, if o.f32 { "" } else { " (not float32)" }))
            .collect::<Vec<_>>()
            .join(", ")
    };
    let how = "choose one with --output NAME, or with name = \"NAME\" under [output] in the feed card";
    let chosen = if let Some(want) = &opts.output {
        outputs.iter().find(|o| &o.info.name == want).ok_or_else(|| {
            anyhow!("the model {} has no output named '{want}'; its outputs are {}", path.display(), list())
        })?
    } else if outputs.len() == 1 {
        &outputs[0]
    } else {
        let fits = |o: &&GraphOutput| {
            o.f32 && class_shaped(&o.info.shape) && opts.classes.is_none_or(|c| o.info.shape.last() == Some(&c))
        };
        let candidates: Vec<&GraphOutput> = outputs.iter().filter(fits).collect();
        match candidates.as_slice() {
            [one] => *one,
            [] => bail!(
                "the model {} has {} outputs and none is shaped like class scores ([1, C]{}): {}. \
                 Say which output holds the scores: {how}",
                path.display(),
                outputs.len(),
                opts.classes.map(|c| format!(" with the feed card's {c} labels")).unwrap_or_default(),
                list()
            ),
            several => bail!(
                "the model {} has {} outputs shaped like class scores ({}); spurion will not guess \
                 which one to explain. All outputs: {}. {how}",
                path.display(),
                several.len(),
                several.iter().map(|o| format!("'{}'", o.info.name)).collect::<Vec<_>>().join(", "),
                list()
            ),
        }
    };
    if !chosen.f32 {
        bail!(
            "output '{}' of {} is {:?}; spurion scores float32 outputs only. Its outputs are {}",
            chosen.info.name,
            path.display(),
            g.outlet_fact(chosen.outlet)?.datum_type,
            list()
        );
    }
    Ok((chosen.outlet, chosen.info.name.clone()))
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}
