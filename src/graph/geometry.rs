//! Window geometry shared by the convolution and pool reverse steps and the incremental
//! occlusion: where each output position's window sits on the input, as tract's own
//! `PoolSpec` places it (padding, strides, dilations), and the occlusion window on a tensor.

use anyhow::Result;
use ndarray::Slice;
use tract_onnx::tract_core::ops::cnn::PoolSpec;

/// One spatial axis of a convolution or pool.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct AxisGeometry {
    /// Input length.
    pub len: usize,
    /// Output length.
    pub out: usize,
    pub kernel: usize,
    pub stride: usize,
    pub dilation: usize,
    pub pad_before: usize,
    pub pad_after: usize,
}

impl AxisGeometry {
    /// How many input positions one window spans: dilation · (kernel − 1) + 1.
    pub fn reach(&self) -> usize {
        self.dilation * (self.kernel - 1) + 1
    }
}

/// The geometry of every spatial axis for an input whose spatial sizes are `hw`.
pub fn axes_hw(spec: &PoolSpec, hw: &[usize]) -> Vec<AxisGeometry> {
    let computed = spec.computed_padding(hw);
    let (strides, dilations) = (spec.strides(), spec.dilations());
    (0..hw.len())
        .map(|ax| AxisGeometry {
            len: hw[ax],
            out: computed[ax].convoluted,
            kernel: spec.kernel_shape[ax],
            stride: strides[ax],
            dilation: dilations[ax],
            pad_before: computed[ax].pad_before,
            pad_after: computed[ax].pad_after,
        })
        .collect()
}

/// The geometry of every spatial axis for an input of full shape `in_shape` (in the spec's
/// data format).
pub fn axes(spec: &PoolSpec, in_shape: &[usize]) -> Result<Vec<AxisGeometry>> {
    let shape = spec.data_format.shape(in_shape.to_vec())?;
    Ok(axes_hw(spec, shape.hw_dims()))
}

/// Per-axis slices of the window of side `window` at corner (y0, x0) on the axes `spatial`
/// (clipped at the far edges), for `slice_each_axis`.
pub fn window_pick(
    spatial: [usize; 2],
    (y0, x0): (usize, usize),
    window: usize,
) -> impl Fn(ndarray::AxisDescription) -> Slice + Copy {
    move |ax| {
        let i = ax.axis.index();
        if i == spatial[0] {
            Slice::from(y0..(y0 + window).min(ax.len))
        } else if i == spatial[1] {
            Slice::from(x0..(x0 + window).min(ax.len))
        } else {
            Slice::from(..)
        }
    }
}
