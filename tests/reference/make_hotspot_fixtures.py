"""Builds the two small classifiers of the hotspot tests (tests/fixtures/hotspot/).

Run by hand: /path/to/python tests/reference/make_hotspot_fixtures.py
Made with onnx 1.23.2, onnxruntime 1.32.0 and numpy 2.4.6. Nothing is trained: each graph is
written by hand, so what it reads is known by construction. Both read a 64x64 grey image
(values 0..1) and answer "no finding" / "finding present".

Two features, each a global average of a ReLU'd convolution:

- R, the ring: a matched filter for a thin bright ring of radius 6 (ring weights minus the mean
  of the disc around it, so flat ground gives 0), on the image itself. No region finder of
  spurion knows a ring this size: it is wider than a glyph and alone.
- A, the anatomy: a difference of Gaussians (sigma 2.5 and 5) for a soft blob of sigma 3.5,
  on the image after a grey opening (a 5x5 min pool, then a 5x5 max pool) that removes bright
  strokes thinner than 5 pixels, rings included.

Then logit("finding present") = a R + b A + c and logit("no finding") = 0:

- ring_shortcut.onnx: a = 7, b = 2, c = -3.5. The ring decides: a ring alone gives +3.5, a
  finding alone -1.5.
- ring_control.onnx: a = 0.3, b = 6, c = -3. The finding decides; the ring nudges the logit by
  0.3, as a trained model nudges on a mark that carries no label, so its map may light the ring
  up while painting it out moves the probability little.

R and A are scaled so that their mean over images with a ring (with a finding) is 1; the
images come from the generator below, which tests/suite/regions_hotspot.rs repeats in Rust
(`phantom`): a dark field, an elliptic body with a soft edge and a gentle texture, optionally a
soft blob (the finding) and a thin anti-aliased ring at full white.
"""
import os

import numpy as np
import onnx
import onnxruntime as ort
from onnx import TensorProto, helper, numpy_helper

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "hotspot")
N = 64
RING_R = 6.0
K_RING = 15
K_BLOB = 21


def phantom(rng, finding, ring):
    """The test generator; tests/suite/regions_hotspot.rs has the same formulas."""
    y, x = np.mgrid[0:N, 0:N].astype(np.float64)
    cx, cy = 32 + rng.uniform(-2, 2), 34 + rng.uniform(-2, 2)
    rho = np.sqrt(((x - cx) / 24.0) ** 2 + ((y - cy) / 27.0) ** 2)
    body = np.clip((1.0 - rho) * 12.0, 0.0, 1.0)
    ph = rng.uniform(0, 2 * np.pi, size=2)
    texture = 0.03 * np.cos(x / 5.0 + ph[0]) * np.cos(y / 7.0 + ph[1])
    img = 0.06 + body * (0.32 + texture)
    if finding:
        a = rng.uniform(0, 2 * np.pi)
        d = rng.uniform(0, 12)
        bx, by = cx + d * np.cos(a), cy + d * np.sin(a)
        img += body * 0.5 * np.exp(-((x - bx) ** 2 + (y - by) ** 2) / (2 * 3.5**2))
    if ring:
        rx, ry = rng.uniform(10, 54), rng.uniform(10, 54)
        d = np.sqrt((x - rx) ** 2 + (y - ry) ** 2)
        cover = np.clip(1.25 - np.abs(d - RING_R), 0.0, 1.0)
        img = img * (1 - cover) + 1.0 * cover
    return np.clip(img, 0.0, 1.0).astype(np.float32)


def kernels():
    c = K_RING // 2
    y, x = np.mgrid[0:K_RING, 0:K_RING].astype(np.float64)
    d = np.sqrt((x - c) ** 2 + (y - c) ** 2)
    ring = np.clip(1.25 - np.abs(d - RING_R), 0.0, 1.0)
    disc = (d <= RING_R + 2.5).astype(np.float64)
    k_ring = ring / ring.sum() - disc / disc.sum()
    c = K_BLOB // 2
    y, x = np.mgrid[0:K_BLOB, 0:K_BLOB].astype(np.float64)
    r2 = (x - c) ** 2 + (y - c) ** 2
    g = np.exp(-r2 / (2 * 2.5**2))
    surround = np.exp(-r2 / (2 * 5.0**2))
    k_blob = g / g.sum() - surround / surround.sum()
    return k_ring.astype(np.float32), k_blob.astype(np.float32)


def init(name, a, dtype=np.float32):
    return numpy_helper.from_array(np.asarray(a, dtype=dtype), name)


def graph(name, head_w, head_b, ring_bias, blob_bias):
    k_ring, k_blob = kernels()
    nodes = [
        helper.make_node("Conv", ["x", "w_ring", "b_ring"], ["c_ring"], kernel_shape=[K_RING, K_RING], name="ring_filter"),
        helper.make_node("Relu", ["c_ring"], ["r_ring"]),
        helper.make_node("GlobalAveragePool", ["r_ring"], ["g_ring"]),
        helper.make_node("Neg", ["x"], ["nx"]),
        helper.make_node("MaxPool", ["nx"], ["eroded_neg"], kernel_shape=[5, 5], pads=[2, 2, 2, 2]),
        helper.make_node("Neg", ["eroded_neg"], ["eroded"]),
        helper.make_node("MaxPool", ["eroded"], ["opened"], kernel_shape=[5, 5], pads=[2, 2, 2, 2]),
        helper.make_node("Conv", ["opened", "w_blob", "b_blob"], ["c_blob"], kernel_shape=[K_BLOB, K_BLOB], name="blob_filter"),
        helper.make_node("Relu", ["c_blob"], ["r_blob"]),
        helper.make_node("GlobalAveragePool", ["r_blob"], ["g_blob"]),
        helper.make_node("Concat", ["g_ring", "g_blob"], ["g"], axis=1),
        helper.make_node("Flatten", ["g"], ["f"], axis=1),
    ]
    outputs = ["f"]
    inits = [
        init("w_ring", k_ring[None, None]),
        init("b_ring", [-ring_bias]),
        init("w_blob", k_blob[None, None]),
        init("b_blob", [-blob_bias]),
    ]
    if head_w is not None:
        nodes.append(helper.make_node("Gemm", ["f", "w_head", "b_head"], ["logits"], transB=1, name="head"))
        inits += [init("w_head", head_w), init("b_head", head_b)]
        outputs = ["logits"]
    g = helper.make_graph(
        nodes,
        name,
        [helper.make_tensor_value_info("x", TensorProto.FLOAT, [1, 1, N, N])],
        [helper.make_tensor_value_info(outputs[0], TensorProto.FLOAT, [1, 2])],
        inits,
    )
    m = helper.make_model(g, opset_imports=[helper.make_opsetid("", 17)], producer_name="spurion-fixtures")
    onnx.checker.check_model(m)
    return m


def features(model, images):
    s = ort.InferenceSession(model.SerializeToString())
    return np.array([s.run(None, {"x": im[None, None]})[0][0] for im in images])


def main():
    os.makedirs(OUT, exist_ok=True)
    rng = np.random.default_rng(2023)
    rings = [phantom(rng, False, True) for _ in range(40)]
    blobs = [phantom(rng, True, False) for _ in range(40)]
    plain = [phantom(rng, False, False) for _ in range(40)]
    # Biases: the ring filter's response on anatomy stays under it, the blob filter's response
    # on plain bodies too (the largest such response, plus a margin).
    # The biases come from the filters' largest responses, computed here directly.
    k_ring, k_blob = kernels()

    def conv_max(img, k):
        from numpy.lib.stride_tricks import sliding_window_view

        return float((sliding_window_view(img, k.shape) * k).sum(axis=(-1, -2)).max())

    def opened(img):
        from numpy.lib.stride_tricks import sliding_window_view

        p = np.pad(img, 2, constant_values=np.inf)
        e = sliding_window_view(p, (5, 5)).min(axis=(-1, -2))
        p = np.pad(e, 2, constant_values=-np.inf)
        return sliding_window_view(p, (5, 5)).max(axis=(-1, -2))

    ring_bias = 1.3 * max(conv_max(im, k_ring) for im in plain + blobs)
    blob_bias = 1.15 * max(conv_max(opened(im), k_blob) for im in plain)
    print(f"ring bias {ring_bias:.4f} (ring response on a ring: {np.mean([conv_max(im, k_ring) for im in rings]):.4f})")
    print(f"blob bias {blob_bias:.4f} (blob response on a finding: {np.mean([conv_max(opened(im), k_blob) for im in blobs]):.4f})")
    feat = graph("features", None, None, ring_bias, blob_bias)
    r0 = features(feat, rings)[:, 0].mean()
    a0 = features(feat, blobs)[:, 1].mean()
    print(f"mean R on rings {r0:.6f}, mean A on findings {a0:.6f}")
    for name, (a, b, c) in {"ring_shortcut": (7.0, 2.0, -3.5), "ring_control": (0.3, 6.0, -3.0)}.items():
        w = np.array([[0.0, 0.0], [a / r0, b / a0]])
        m = graph(name, w, np.array([0.0, c]), ring_bias, blob_bias)
        onnx.save(m, os.path.join(OUT, f"{name}.onnx"))
        with open(os.path.join(OUT, f"{name}.feed.toml"), "w") as f:
            f.write(
                "# Made by tests/reference/make_hotspot_fixtures.py.\n"
                "[input]\nlayout = \"nchw\"\nchannels = 1\nheight = 64\nwidth = 64\nmean = [0.0]\nstd = [1.0]\n\n"
                "[output]\nkind = \"logits\"\nlabels = [\"no finding\", \"finding present\"]\n"
            )
        s = ort.InferenceSession(m.SerializeToString())
        z = lambda ims: np.array([s.run(None, {"x": im[None, None]})[0][0, 1] for im in ims])  # noqa: E731
        print(f"{name}: logit 1 on rings {z(rings).mean():.2f}, on findings {z(blobs).mean():.2f}, on plain {z(plain).mean():.2f}")


if __name__ == "__main__":
    main()
