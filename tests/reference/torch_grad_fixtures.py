"""Builds the whole-network gradient fixtures in tests/fixtures/torch/ with PyTorch autograd.

Run by hand (PyTorch is ~6 GB here and is not part of CI):
    /path/to/venv-with-torch/bin/python tests/reference/torch_grad_fixtures.py
Made with torch 2.15.0 and torchvision 0.29.2 (exporters: torch.onnx legacy TorchScript exporter
and the torch.export-based one), onnx 1.23.2, onnxruntime 1.32.0, numpy 2.4.6.

Each network is a small member of a family that image classifiers are built from, written here
from the published designs (not trained, seeded random weights, batch-norm statistics set to
non-trivial values so folding matters):
  resnet      basic residual blocks, batch norm, stride-2 shortcut conv (He et al. 2016)
  mobilenet2  inverted residuals, depthwise conv, ReLU6 (Sandler et al. 2018)
  mobilenet3  hard-swish, squeeze-excite with hard-sigmoid (Howard et al. 2019)
  efficientnet MBConv with SiLU and sigmoid squeeze-excite (Tan & Le 2019); no kinks anywhere,
              so it is the smooth model of the directional-derivative check
  densenet    dense blocks (concat), transition with average pool (Huang et al. 2017)
  squeezenet  fire modules (concat), ceil-mode max pool, dropout, conv classifier (Iandola et al. 2016)
  vgg         conv/ReLU stacks, max pool, adaptive average pool, linear head with dropout
              (Simonyan & Zisserman 2015)
  mixed       GELU, ELU, softplus, leaky ReLU, PReLU, tanh, nearest and bilinear upsampling,
              a final softmax (the activations the families above do not use)
and six built from torchvision's own classes at small widths and depths (issue 24: layer
normalisation, attention, GELU, shifted windows), every weight re-drawn (see `redraw`):
  vit         VisionTransformer (Dosovitskiy et al. 2021): patch convolution, class token,
              multi-head attention, LayerNormalization as one op (opset 17)
  vit16       the same network at opset 16, where the exporter writes layer normalisation
              out as ReduceMean/Sub/Pow/Sqrt/Div
  swin        SwinTransformer (Liu et al. 2021): windows, shifted windows (torch.roll),
              relative position bias, patch merging
  swin2       SwinTransformer with the V2 block and merging (Liu et al. 2022): cosine
              attention (F.normalize), the continuous position bias MLP
  convnext    ConvNeXt (Liu et al. 2022): 7x7 depthwise convolutions, channels-last layer
              norm between permutes, layer scale
  maxvit      MaxVit (Tu et al. 2022): MBConv with batch norm and squeeze-excite, block and
              grid attention, a tanh in the head

Usage: torch_grad_fixtures.py [NAME ...] rebuilds only the networks named (default: all) and
keeps the other entries of manifest.json. The dynamo exporter needs onnxscript.

For each NAME it writes NAME.onnx (batch 1) and
  NAME.x.npy       the input (float32),
  NAME.logits.npy  the output of the float64 copy of the network at x,
  NAME.grad.npy    d output[target] / d x from PyTorch autograd on the float64 copy (the
                   reference: a float32 gradient from spurion is compared with it at 1e-4 relative),
and manifest.json with the target class, exporter, opset and op types of each file.
"""
import json
import os
import sys

import numpy as np
import onnx
import torch
import torch.nn as nn
import torch.nn.functional as F
import torchvision

OUT = os.path.join(os.path.dirname(__file__), "..", "fixtures", "torch")
SIZE = 40


def bn(c):
    b = nn.BatchNorm2d(c)
    with torch.no_grad():
        b.running_mean.uniform_(-0.2, 0.2)
        b.running_var.uniform_(0.5, 1.5)
        b.weight.uniform_(0.5, 1.5)
        b.bias.uniform_(-0.2, 0.2)
    return b


class Basic(nn.Module):
    def __init__(self, cin, cout, stride):
        super().__init__()
        self.c1, self.b1 = nn.Conv2d(cin, cout, 3, stride, 1, bias=False), bn(cout)
        self.c2, self.b2 = nn.Conv2d(cout, cout, 3, 1, 1, bias=False), bn(cout)
        self.short = None
        if stride != 1 or cin != cout:
            self.short = nn.Sequential(nn.Conv2d(cin, cout, 1, stride, bias=False), bn(cout))

    def forward(self, x):
        y = self.b2(self.c2(F.relu(self.b1(self.c1(x)))))
        return F.relu(y + (x if self.short is None else self.short(x)))


class ResNet(nn.Module):
    def __init__(self):
        super().__init__()
        self.stem = nn.Sequential(nn.Conv2d(3, 8, 5, 2, 2, bias=False), bn(8), nn.ReLU(),
                                  nn.MaxPool2d(3, 2, 1))
        self.blocks = nn.Sequential(Basic(8, 8, 1), Basic(8, 16, 2))
        self.fc = nn.Linear(16, 5)

    def forward(self, x):
        x = self.blocks(self.stem(x))
        return self.fc(torch.flatten(F.adaptive_avg_pool2d(x, 1), 1))


class Inverted(nn.Module):
    def __init__(self, cin, cout, stride, expand, act, se=None):
        super().__init__()
        mid = cin * expand
        self.use_res = stride == 1 and cin == cout
        self.expand = nn.Sequential(nn.Conv2d(cin, mid, 1, bias=False), bn(mid), act())
        self.dw = nn.Sequential(nn.Conv2d(mid, mid, 3, stride, 1, groups=mid, bias=False), bn(mid), act())
        self.se = se(mid) if se else None
        self.project = nn.Sequential(nn.Conv2d(mid, cout, 1, bias=False), bn(cout))

    def forward(self, x):
        y = self.dw(self.expand(x))
        if self.se is not None:
            y = self.se(y)
        y = self.project(y)
        return x + y if self.use_res else y


class SqueezeExcite(nn.Module):
    def __init__(self, c, gate):
        super().__init__()
        self.down, self.up, self.gate = nn.Conv2d(c, max(c // 4, 4), 1), nn.Conv2d(max(c // 4, 4), c, 1), gate

    def forward(self, x):
        s = F.adaptive_avg_pool2d(x, 1)
        # EfficientNet squeezes through SiLU, MobileNet v3 through ReLU.
        act = F.silu if self.gate is torch.sigmoid else F.relu
        return x * self.gate(self.up(act(self.down(s))))


class MobileNet2(nn.Module):
    def __init__(self):
        super().__init__()
        self.stem = nn.Sequential(nn.Conv2d(3, 8, 3, 2, 1, bias=False), bn(8), nn.ReLU6())
        self.blocks = nn.Sequential(Inverted(8, 8, 1, 3, nn.ReLU6), Inverted(8, 12, 2, 3, nn.ReLU6),
                                    Inverted(12, 12, 1, 3, nn.ReLU6))
        self.head = nn.Sequential(nn.Conv2d(12, 24, 1, bias=False), bn(24), nn.ReLU6())
        self.fc = nn.Sequential(nn.Dropout(0.2), nn.Linear(24, 5))

    def forward(self, x):
        x = self.head(self.blocks(self.stem(x)))
        return self.fc(x.mean((2, 3)))


class MobileNet3(nn.Module):
    def __init__(self):
        super().__init__()
        se = lambda c: SqueezeExcite(c, F.hardsigmoid)
        self.stem = nn.Sequential(nn.Conv2d(3, 8, 3, 2, 1, bias=False), bn(8), nn.Hardswish())
        self.blocks = nn.Sequential(Inverted(8, 8, 1, 2, nn.ReLU, se), Inverted(8, 12, 2, 3, nn.Hardswish, se),
                                    Inverted(12, 12, 1, 3, nn.Hardswish, se))
        self.fc = nn.Sequential(nn.Linear(12, 16), nn.Hardswish(), nn.Dropout(0.2), nn.Linear(16, 5))

    def forward(self, x):
        x = self.blocks(self.stem(x))
        return self.fc(torch.flatten(F.adaptive_avg_pool2d(x, 1), 1))


class EfficientNet(nn.Module):
    def __init__(self):
        super().__init__()
        se = lambda c: SqueezeExcite(c, torch.sigmoid)
        self.stem = nn.Sequential(nn.Conv2d(3, 8, 3, 2, 1, bias=False), bn(8), nn.SiLU())
        self.blocks = nn.Sequential(Inverted(8, 8, 1, 1, nn.SiLU, se), Inverted(8, 12, 2, 4, nn.SiLU, se),
                                    Inverted(12, 12, 1, 4, nn.SiLU, se))
        self.head = nn.Sequential(nn.Conv2d(12, 24, 1, bias=False), bn(24), nn.SiLU())
        self.fc = nn.Linear(24, 5)

    def forward(self, x):
        x = self.head(self.blocks(self.stem(x)))
        return self.fc(torch.flatten(F.adaptive_avg_pool2d(x, 1), 1))


class DenseLayer(nn.Module):
    def __init__(self, cin, growth):
        super().__init__()
        self.f = nn.Sequential(bn(cin), nn.ReLU(), nn.Conv2d(cin, 2 * growth, 1, bias=False), bn(2 * growth),
                               nn.ReLU(), nn.Conv2d(2 * growth, growth, 3, 1, 1, bias=False))

    def forward(self, x):
        return torch.cat([x, self.f(x)], 1)


class DenseNet(nn.Module):
    def __init__(self):
        super().__init__()
        self.stem = nn.Sequential(nn.Conv2d(3, 8, 3, 2, 1, bias=False), bn(8), nn.ReLU(), nn.MaxPool2d(2, 2))
        self.block1 = nn.Sequential(DenseLayer(8, 4), DenseLayer(12, 4))
        self.trans = nn.Sequential(bn(16), nn.ReLU(), nn.Conv2d(16, 8, 1, bias=False), nn.AvgPool2d(2, 2))
        self.block2 = nn.Sequential(DenseLayer(8, 4), DenseLayer(12, 4))
        self.final = bn(16)
        self.fc = nn.Linear(16, 5)

    def forward(self, x):
        x = self.final(self.block2(self.trans(self.block1(self.stem(x)))))
        return self.fc(torch.flatten(F.adaptive_avg_pool2d(F.relu(x), 1), 1))


class Fire(nn.Module):
    def __init__(self, cin, s, e):
        super().__init__()
        self.sq, self.e1, self.e3 = nn.Conv2d(cin, s, 1), nn.Conv2d(s, e, 1), nn.Conv2d(s, e, 3, padding=1)

    def forward(self, x):
        x = F.relu(self.sq(x))
        return torch.cat([F.relu(self.e1(x)), F.relu(self.e3(x))], 1)


class SqueezeNet(nn.Module):
    def __init__(self):
        super().__init__()
        self.features = nn.Sequential(nn.Conv2d(3, 16, 3, 2), nn.ReLU(), nn.MaxPool2d(3, 2, ceil_mode=True),
                                      Fire(16, 4, 8), Fire(16, 4, 8), nn.MaxPool2d(3, 2, ceil_mode=True),
                                      Fire(16, 6, 12))
        self.classifier = nn.Sequential(nn.Dropout(0.5), nn.Conv2d(24, 5, 1), nn.ReLU(), nn.AdaptiveAvgPool2d(1))

    def forward(self, x):
        return torch.flatten(self.classifier(self.features(x)), 1)


class Vgg(nn.Module):
    def __init__(self):
        super().__init__()
        cfg, layers, c = [8, "M", 16, 16, "M", 24, "M"], [], 3
        for v in cfg:
            if v == "M":
                layers.append(nn.MaxPool2d(2, 2))
            else:
                layers += [nn.Conv2d(c, v, 3, padding=1), nn.ReLU(inplace=True)]
                c = v
        self.features = nn.Sequential(*layers)
        self.pool = nn.AdaptiveAvgPool2d((2, 2))
        self.classifier = nn.Sequential(nn.Linear(24 * 4, 32), nn.ReLU(True), nn.Dropout(), nn.Linear(32, 5))

    def forward(self, x):
        return self.classifier(torch.flatten(self.pool(self.features(x)), 1))


class Mixed(nn.Module):
    def __init__(self):
        super().__init__()
        self.c1 = nn.Conv2d(3, 8, 3, 2, 1)
        self.c2 = nn.Conv2d(8, 8, 3, 1, 1)
        self.c3 = nn.Conv2d(8, 8, 3, 2, 1, dilation=1)
        self.c4 = nn.Conv2d(8, 8, 3, 1, 2, dilation=2)
        self.prelu = nn.PReLU(8, init=0.2)
        self.fc = nn.Linear(8, 5)

    def forward(self, x):
        a = F.gelu(self.c1(x))
        b = F.elu(self.c2(a), alpha=0.7) + F.softplus(a)
        c = F.leaky_relu(self.c3(b), 0.1)
        up = F.interpolate(c, scale_factor=2, mode="nearest") + F.interpolate(c, scale_factor=2, mode="bilinear",
                                                                             align_corners=False)
        d = self.prelu(self.c4(up * torch.tanh(b)))
        z = self.fc(torch.flatten(F.adaptive_avg_pool2d(d, 1), 1))
        return torch.softmax(z, 1)


# name, class, exporter ("legacy" TorchScript / "dynamo" torch.export), opset
NETS = [
    ("resnet", ResNet, "legacy", 11),
    ("mobilenet2", MobileNet2, "legacy", 13),
    ("mobilenet3", MobileNet3, "legacy", 17),
    ("efficientnet", EfficientNet, "dynamo", 18),
    ("densenet", DenseNet, "legacy", 12),
    ("squeezenet", SqueezeNet, "legacy", 11),
    ("vgg", Vgg, "dynamo", 20),
    ("mixed", Mixed, "legacy", 16),
]

# The torchvision classes at small widths and depths (input SIZE_TV², five classes).
SIZE_TV = 32


def tv_vit():
    from torchvision.models.vision_transformer import VisionTransformer
    return VisionTransformer(image_size=SIZE_TV, patch_size=8, num_layers=2, num_heads=2, hidden_dim=32,
                             mlp_dim=64, num_classes=5)


def tv_swin(v2=False):
    from torchvision.models import swin_transformer as sw
    extra = dict(block=sw.SwinTransformerBlockV2, downsample_layer=sw.PatchMergingV2) if v2 else {}
    return sw.SwinTransformer(patch_size=[4, 4], embed_dim=16, depths=[2, 2], num_heads=[2, 2], window_size=[4, 4],
                              num_classes=5, **extra)


def tv_convnext():
    from torchvision.models.convnext import CNBlockConfig, ConvNeXt
    return ConvNeXt([CNBlockConfig(16, 32, 1), CNBlockConfig(32, None, 1)], layer_scale=0.5, num_classes=5)


def tv_maxvit():
    from torchvision.models.maxvit import MaxVit
    return MaxVit(input_size=(SIZE_TV, SIZE_TV), stem_channels=8, partition_size=2, block_channels=[16, 32],
                  block_layers=[1, 1], head_dim=8, stochastic_depth_prob=0.0, num_classes=5)


def redraw(net):
    """Re-draws every weight at a scale where each layer matters: torchvision's initialisations
    leave ViT's head at zero, ConvNeXt's layer scale at 1e-6 and every norm at identity, which
    would hide the ops under test."""
    done = set()
    with torch.no_grad():
        for m in net.modules():
            if isinstance(m, (nn.Linear, nn.Conv2d)):
                fan_in = m.weight[0].numel()
                m.weight.normal_(0, 1.0 / fan_in ** 0.5)
                if m.bias is not None:
                    m.bias.uniform_(-0.2, 0.2)
            elif isinstance(m, (nn.LayerNorm, nn.BatchNorm2d)):
                m.weight.uniform_(0.5, 1.5)
                m.bias.uniform_(-0.2, 0.2)
                if isinstance(m, nn.BatchNorm2d):
                    m.running_mean.uniform_(-0.2, 0.2)
                    m.running_var.uniform_(0.5, 1.5)
            else:
                continue
            done.update(id(p) for p in m.parameters(recurse=False))
        for name, p in net.named_parameters():
            if id(p) in done or "logit_scale" in name:
                continue
            if "layer_scale" in name:
                p.uniform_(0.3, 1.0)
            else:  # class token, position embeddings, relative position bias tables
                p.normal_(0, 0.5)
    return net


# name, builder, exporter, opset
TV_NETS = [
    ("vit", tv_vit, "legacy", 17),
    ("vit16", tv_vit, "legacy", 16),
    ("swin", tv_swin, "legacy", 17),
    ("swin2", lambda: tv_swin(v2=True), "legacy", 17),
    ("convnext", tv_convnext, "legacy", 17),
    ("maxvit", tv_maxvit, "legacy", 17),
]


def export(net, x, path, exporter, opset):
    if exporter == "legacy":
        torch.onnx.export(net, (x,), path, dynamo=False, opset_version=opset, input_names=["x"],
                          output_names=["y"], do_constant_folding=True)
    else:
        prog = torch.onnx.export(net, (x,), dynamo=True, opset_version=opset, input_names=["x"],
                                 output_names=["y"], external_data=False)
        prog.save(path, external_data=False)


def main():
    os.makedirs(OUT, exist_ok=True)
    only = set(sys.argv[1:])
    mpath = os.path.join(OUT, "manifest.json")
    manifest = {"nets": {}}
    if only and os.path.exists(mpath):
        with open(mpath) as f:
            manifest = json.load(f)
    manifest.update({"torch": torch.__version__, "torchvision": torchvision.__version__, "onnx": onnx.__version__,
                     "size": SIZE})
    nets = [(n, c, e, o, SIZE, False) for n, c, e, o in NETS] + [(n, c, e, o, SIZE_TV, True) for n, c, e, o in TV_NETS]
    for i, (name, cls, exporter, opset, size, tv) in enumerate(nets):
        if only and name not in only:
            continue
        # vit16 is vit at another opset: the same seed, so the same weights.
        seed = i - 1 if name == "vit16" else i
        torch.manual_seed(100 + seed)
        net = cls().eval()
        if tv:
            redraw(net)
        rng = np.random.default_rng(200 + seed)
        # A smooth image-like input: low-frequency pattern plus mild noise, roughly unit scale.
        yy, xx = np.mgrid[0:size, 0:size] / size
        base = np.stack([np.sin(2 * np.pi * (xx * (1 + c) + yy * (2 - c) / 2) + c) for c in range(3)])
        x = (base + 0.3 * rng.standard_normal((3, size, size)))[None].astype(np.float32)
        path = os.path.join(OUT, f"{name}.onnx")
        export(net, torch.from_numpy(x), path, exporter, opset)
        m = onnx.load(path)
        onnx.checker.check_model(m)
        net64 = net.double()
        x64 = torch.from_numpy(x.astype(np.float64)).requires_grad_(True)
        y = net64(x64)[0]
        # Softmax output: explain the second most likely class so the gradient is not starved.
        target = int(torch.argsort(y, descending=True)[1 if name == "mixed" else 0])
        (g,) = torch.autograd.grad(y[target], x64)
        np.save(os.path.join(OUT, f"{name}.x.npy"), x)
        np.save(os.path.join(OUT, f"{name}.logits.npy"), y.detach().numpy())
        np.save(os.path.join(OUT, f"{name}.grad.npy"), g.numpy())
        ops = sorted({n.op_type for n in m.graph.node})
        manifest["nets"][name] = {"exporter": exporter, "opset": opset, "ops": ops, "target": target,
                                  "bytes": os.path.getsize(path), "size": size}
        print(f"{name:13s} {exporter:6s} opset {opset}  {os.path.getsize(path):7d} B  {' '.join(ops)}")
    with open(mpath, "w") as f:
        json.dump(manifest, f, indent=1, sort_keys=True)
        f.write("\n")


if __name__ == "__main__":
    main()
