//! Re-drawing a model's weights, for the model-parameter randomisation test.
//!
//! A **layer** is a node of the ONNX graph with constant parameters: Conv, ConvTranspose, Gemm
//! and MatMul with a constant weight, BatchNormalization, InstanceNormalization and
//! LayerNormalization. Layers are listed in the file's node order, which the ONNX standard
//! requires to be topological (ONNX IR specification, "Graphs"), input side first.
//!
//! The initialisers, the usual ones for these shapes:
//! - weights: He (Kaiming) normal, N(0, 2 / fan_in) (He, Zhang, Ren, Sun 2015, "Delving Deep
//!   into Rectifiers", ICCV), because the networks spurion reads are mostly ReLU networks, for
//!   which it keeps the signal's scale from layer to layer; fan_in is the inputs one output
//!   sums over (in-channels per group × kernel area for a convolution, K for a matrix product);
//! - biases: 0 (common practice);
//! - normalisation: scale 1, shift 0, running mean 0, running variance 1 (the layers' own
//!   starting values, common practice).
//!
//! Each layer draws from its own seeded stream, so a layer gets the same new weights whichever
//! other layers are re-drawn with it: the cascade's steps differ by one layer each.

use anyhow::{Result, bail};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use serde::{Deserialize, Serialize};

use crate::model::pb;

/// The initialisers, in words (for files and pictures).
pub const INIT: &str = "weights He-normal N(0, 2/fan_in) (He et al. 2015); biases 0; normalisation scale 1, \
shift 0, running mean 0, running variance 1";

/// What a parameter is, which decides how it is re-drawn.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Role {
    Weight { fan_in: usize },
    Bias,
    Scale,
    Shift,
    Mean,
    Variance,
}

/// One constant parameter of a layer: the name of its tensor and its role.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Param {
    pub name: String,
    pub role: Role,
}

/// A node with constant parameters.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Layer {
    /// Index among the layers, input side first.
    pub index: usize,
    pub node: String,
    pub op: String,
    pub params: Vec<Param>,
}

impl Layer {
    /// The layer as a person reads it: its place among the model's `total` layers with
    /// weights and its kind, "layer 7 of 7 (fully connected, output side)". The ONNX node name
    /// ([`Layer::label`]) stays for the files and tooltips.
    pub fn plain(&self, total: usize) -> String {
        let kind = match self.op.as_str() {
            "Conv" => "convolution",
            "ConvTranspose" => "transposed convolution",
            "Gemm" | "MatMul" => "fully connected",
            "BatchNormalization" | "InstanceNormalization" | "LayerNormalization" | "GroupNormalization" => "normalisation",
            other => other,
        };
        let side = match (self.index, total) {
            (_, 1) => "",
            (0, _) => ", input side",
            (i, t) if i + 1 == t => ", output side",
            _ => "",
        };
        format!("layer {} of {total} ({kind}{side})", self.index + 1)
    }

    /// "Gemm 19.weight" style: the op and its first parameter's name, which people recognise.
    pub fn label(&self) -> String {
        match (self.node.is_empty(), self.params.first()) {
            (false, _) => format!("{} {}", self.op, self.node),
            (true, Some(p)) => format!("{} {}", self.op, p.name),
            (true, None) => self.op.clone(),
        }
    }
}

/// A constant tensor of the graph by name: an initializer, or the value of a Constant node.
fn constant<'a>(g: &'a pb::GraphProto, name: &str) -> Option<&'a pb::TensorProto> {
    g.initializer.iter().find(|t| t.name == name).or_else(|| {
        g.node
            .iter()
            .filter(|n| n.op_type == "Constant" && n.output.first().is_some_and(|o| o == name))
            .find_map(|n| n.attribute.iter().find(|a| a.name == "value").and_then(|a| a.t.as_ref()))
    })
}

fn constant_mut<'a>(g: &'a mut pb::GraphProto, name: &str) -> Option<&'a mut pb::TensorProto> {
    if let Some(i) = g.initializer.iter().position(|t| t.name == name) {
        return g.initializer.get_mut(i);
    }
    g.node
        .iter_mut()
        .filter(|n| n.op_type == "Constant" && n.output.first().is_some_and(|o| o == name))
        .find_map(|n| n.attribute.iter_mut().find(|a| a.name == "value").and_then(|a| a.t.as_mut()))
}

fn attr_int(n: &pb::NodeProto, name: &str) -> i64 {
    n.attribute.iter().find(|a| a.name == name).map_or(0, |a| a.i)
}

fn dims(t: &pb::TensorProto) -> Vec<usize> {
    t.dims.iter().map(|&d| d.max(0) as usize).collect()
}

/// The parameters of one node, if it is a layer.
fn params_of(g: &pb::GraphProto, n: &pb::NodeProto) -> Vec<Param> {
    let input = |k: usize| n.input.get(k).filter(|s| !s.is_empty()).and_then(|s| constant(g, s).map(|t| (s.clone(), dims(t))));
    let mut out = vec![];
    let mut push = |k: usize, role: &dyn Fn(&[usize]) -> Option<Role>| {
        if let Some((name, d)) = input(k) {
            if let Some(role) = role(&d) {
                out.push(Param { name, role });
            }
        }
    };
    match n.op_type.as_str() {
        // Conv W [M, C/g, k…] and ConvTranspose W [C, M/g, k…]: fan-in from dims 1.. as the usual
        // initialisers compute it.
        "Conv" | "ConvTranspose" => {
            push(1, &|d| (d.len() >= 3).then(|| Role::Weight { fan_in: d[1..].iter().product() }));
            push(2, &|_| Some(Role::Bias));
        }
        "Gemm" => {
            let (ta, tb) = (attr_int(n, "transA") != 0, attr_int(n, "transB") != 0);
            push(0, &|d| (d.len() == 2).then(|| Role::Weight { fan_in: if ta { d[0] } else { d[1] } }));
            push(1, &|d| (d.len() == 2).then(|| Role::Weight { fan_in: if tb { d[1] } else { d[0] } }));
            push(2, &|_| Some(Role::Bias));
        }
        "MatMul" => {
            push(0, &|d| (d.len() >= 2).then(|| Role::Weight { fan_in: d[d.len() - 1] }));
            push(1, &|d| (d.len() >= 2).then(|| Role::Weight { fan_in: d[d.len() - 2] }));
        }
        "BatchNormalization" => {
            for (k, role) in [(1, Role::Scale), (2, Role::Shift), (3, Role::Mean), (4, Role::Variance)] {
                push(k, &|_| Some(role));
            }
        }
        "InstanceNormalization" | "LayerNormalization" => {
            push(1, &|_| Some(Role::Scale));
            push(2, &|_| Some(Role::Shift));
        }
        _ => {}
    }
    // A layer re-draws its weights; a matrix product of two inputs has none.
    if out.iter().any(|p| matches!(p.role, Role::Weight { .. } | Role::Scale)) { out } else { vec![] }
}

/// The layers of a model, input side first.
pub fn layers(proto: &pb::ModelProto) -> Vec<Layer> {
    let Some(g) = proto.graph.as_ref() else { return vec![] };
    g.node
        .iter()
        .filter_map(|n| {
            let params = params_of(g, n);
            (!params.is_empty()).then(|| (n.name.clone(), n.op_type.clone(), params))
        })
        .enumerate()
        .map(|(index, (node, op, params))| Layer { index, node, op, params })
        .collect()
}

/// FLOAT in `TensorProto.DataType`.
const FLOAT: i32 = 1;

/// The model with the parameters of `chosen` re-drawn (see the module docs); `seed` and each
/// layer's index decide its new values.
pub fn redraw(proto: &pb::ModelProto, chosen: &[Layer], seed: u64) -> Result<pb::ModelProto> {
    let mut out = proto.clone();
    let Some(g) = out.graph.as_mut() else { bail!("the model holds no graph") };
    for layer in chosen {
        let mut rng = ChaCha8Rng::seed_from_u64(seed ^ (layer.index as u64 + 1).wrapping_mul(0x9E37_79B9_7F4A_7C15));
        for p in &layer.params {
            let Some(t) = constant_mut(g, &p.name) else {
                bail!("layer {} names parameter {} which the graph does not hold", layer.label(), p.name)
            };
            if t.data_type != FLOAT {
                bail!(
                    "parameter {} of layer {} is not float32 (ONNX data type {}); spurion re-draws float32 weights only",
                    p.name,
                    layer.label(),
                    t.data_type
                );
            }
            let len: usize = dims(t).iter().product();
            let values: Vec<f32> = match p.role {
                Role::Weight { fan_in } => {
                    let normal = Normal::new(0.0, (2.0 / fan_in.max(1) as f64).sqrt()).expect("a positive spread");
                    (0..len).map(|_| normal.sample(&mut rng) as f32).collect()
                }
                Role::Bias | Role::Shift | Role::Mean => vec![0.0; len],
                Role::Scale | Role::Variance => vec![1.0; len],
            };
            t.raw_data.clear();
            t.external_data.clear();
            t.data_location = None;
            t.float_data = values;
        }
    }
    Ok(out)
}

/// The float values of a constant tensor of the model (raw or typed storage), for tests and
/// figures.
pub fn values(proto: &pb::ModelProto, name: &str) -> Option<Vec<f32>> {
    let t = constant(proto.graph.as_ref()?, name)?;
    if t.data_type != FLOAT || !t.external_data.is_empty() {
        return None;
    }
    if !t.float_data.is_empty() {
        return Some(t.float_data.clone());
    }
    Some(t.raw_data.chunks_exact(4).map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])).collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn layers_are_named_by_place_and_kind_not_by_onnx_node() {
        let layer = |index: usize, op: &str| Layer { index, node: format!("/{index}/{op}"), op: op.into(), params: vec![] };
        assert_eq!(layer(6, "Gemm").plain(7), "layer 7 of 7 (fully connected, output side)");
        assert_eq!(layer(0, "Conv").plain(7), "layer 1 of 7 (convolution, input side)");
        assert_eq!(layer(3, "BatchNormalization").plain(7), "layer 4 of 7 (normalisation)");
        assert_eq!(layer(0, "MatMul").plain(1), "layer 1 of 1 (fully connected)");
    }
}
