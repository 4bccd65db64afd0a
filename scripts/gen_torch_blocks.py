#!/usr/bin/env python3
"""Export small seeded torch blocks with dynamic dims to ONNX and record their true sites.

Not run in CI (needs torch: pip install -r scripts/requirements-torch.txt).
Its outputs are committed under tests/fixtures/torch-blocks/ so tests run offline.

Invented scenarios, each a real block as models ship it, with random seeded weights:
  solar-crack     rooftop-solar-panel crack detector: conv stem, an inverted-residual
                  block with squeeze-excitation, hard-swish head (image, dynamic batch)
  ferry-intent    harbour-ferry message classifier: one pre-norm encoder layer (attention
                  by scaled_dot_product_attention with a bool padding mask, GELU MLP)
  ship-log        ship-log summariser: one decoder layer with RMSNorm, rotary embeddings,
                  causal and padding masks, position ids from a cumulative sum of the
                  int64 mask (left padding) and a SwiGLU MLP (dynamic batch and sequence)
  ship-log-unpadded  the same decoder fed input_ids only: its mask is computed from the
                  sequence length, so the cumulative sum reads a shape-only tensor
  reef-survey     coral-reef survey tagger: patch embedding and two windowed-attention
                  blocks (the second with shifted windows and its mask), GELU MLPs
  allotment-diary allotment-diary topic tagger: a T5-style encoder whose relative-position
                  buckets are an int64 chain (Abs, then Cast to float), a ReLU MLP and
                  a gated tanh-GELU MLP
  loom-mlp        loom-fabric defect tagger's ViT-style MLPs: Linear then GELU, SiLU,
                  swish (beta 1.702) or hard-swish, each with a zero, a tiny
                  (max |b| = 2.5e-6) and a normal bias, on patch tokens
  turbine-icing   wind-turbine icing estimator: Linear then two softplus with beta and
                  threshold, SiLU, GELU and hard-swish; exported also without optimisation
  garage-counts   parking-garage occupancy counter built with onnx.helper: an int32 Relu,
                  an int64 Abs then Cast, and one float Relu
Exports: TorchScript exporter (dynamo=False) at opset 17 with `dynamic_axes`; dynamo
exporter at opsets 18 and 20 with `dynamic_shapes` (optimised; turbine-icing also with
optimize=False).

Truth comes from the torch side. Every activation module is hooked; the tensors of the
ONNX graph holding the module's input and output values (onnxruntime, all tensors listed
as outputs, optimisations off) are found by value: the output is the earliest tensor
with the module's output values, the input the latest ancestor of it with the module's
input values (so a bias Add, even of zeros, stays before the site). The nodes between
them form the site, whose onnxruntime values are then checked against the kind's
published formula in float64 on every input set. A wrong region or parameter fails
the script. Where an exporter writes another function than torch's (TorchScript drops
softplus's threshold), the truth is what the file computes, and says so.

Per model folder: model.onnx (exactly as exported); per input set SET,
inputs/SET/NAME.npy and outputs/SET/NAME.npy (onnxruntime CPU, default session
options); site_values/SET.npz for the last, smaller set (keys mapped to tensor names
in the manifest); inputs-float64/SET/NAME.npy, one float32 input as a float64 copy.

Usage: python3 scripts/gen_torch_blocks.py
"""

import math
import shutil
from collections import Counter
from dataclasses import dataclass, field

import numpy as np
import onnx
import onnx_ir
import onnxruntime as ort
import onnxscript
import torch
import torch.nn as nn
import torch.nn.functional as F
from onnx import TensorProto, helper

from onnx_info import (ROOT, elem_type_name, file_figures, info_figures, save_npz, versions,
                       write_json)
from site_truth import (REF_ATOL, REF_RTOL, Graph, check_near_misses, check_sites, f32,
                        reference, session_with_outputs, site_entry)
from torch_common import ScaledSwish, export

OUT = ROOT / "tests" / "fixtures" / "torch-blocks"
GENERATOR = "scripts/gen_torch_blocks.py"
TORCH_SEED = 1234
INPUT_SEED = 4321
# (exporter id, dynamo flag, opset, dynamo optimize flag)
EXPORTS = [
    ("ts", False, 17, None),
    ("dynamo", True, 18, True),
    ("dynamo", True, 20, True),
]
NOOPT_EXPORTS = [
    ("dynamo-noopt", True, 18, False),
    ("dynamo-noopt", True, 20, False),
]
# Ranges given to torch.export for each named dim.
DIM_RANGES = {"batch": (1, 8), "seq": (2, 16), "tokens": (2, 16)}
# A tensor holds a probed torch value when max |onnx - torch| <= MATCH * max(1, max |torch|);
# among such tensors, those within TIE of the closest one count as equal copies.
MATCH, TIE = 1e-4, 1e-6
INTEGER_TYPES = {TensorProto.INT8, TensorProto.INT16, TensorProto.INT32, TensorProto.INT64,
                 TensorProto.UINT8, TensorProto.UINT16, TensorProto.UINT32, TensorProto.UINT64}
# Ops that alone can have the shape of an activation (Abs is leaky_relu with alpha -1,
# Max with 0 is relu, Min/Max/Clip bound like clip, Where selects like the piecewise kinds).
LOOKALIKE_OPS = {"Abs", "Relu", "LeakyRelu", "PRelu", "Max", "Min", "Clip", "Where", "Neg"}


# ---------------------------------------------------------------- scenario description
@dataclass
class Site:
    """An activation module of the torch definition and its truth. `note` goes into
    the manifest; `ts_params` replaces `params` for the TorchScript export, with
    `ts_note` saying why."""
    module: str
    kind: str
    params: dict = field(default_factory=dict)
    note: dict = field(default_factory=dict)
    ts_params: dict = None
    ts_note: str = None


@dataclass
class Scenario:
    """A torch block and what its exports must hold.

    `inputs`/`outputs`: (name, dtype, shape) with named dims as strings.
    `sets`: (set name, {dim: size}). `feeds(rng, sizes)` makes one set's arrays.
    `sites`: Site entries. `near_misses`: dicts with `block`, `output`
    and `inputs` probes ((module path, "in" | "out")), `not_kinds` and `reason`.
    """
    id: str
    description: str
    net: nn.Module
    inputs: list
    outputs: list
    sets: list
    feeds: object
    sites: list
    near_misses: list = field(default_factory=list)
    exports: list = field(default_factory=lambda: EXPORTS)


def text_sets():
    return [("b2-s12", {"batch": 2, "seq": 12}), ("b1-s7", {"batch": 1, "seq": 7})]


def image_sets():
    return [("b2", {"batch": 2}), ("b1", {"batch": 1})]


def token_ids(rng, sizes, vocab, pad_left):
    """int64 ids in [1, vocab) and an int64 mask; the last row of each set is padded
    (3 of 12 or 2 of 7 positions) on the left or the right, padding ids set to 0."""
    b, s = sizes["batch"], sizes["seq"]
    ids = rng.integers(1, vocab, size=(b, s), dtype=np.int64)
    mask = np.ones((b, s), dtype=np.int64)
    pad = 3 if s >= 12 else 2
    cols = slice(0, pad) if pad_left else slice(s - pad, s)
    mask[b - 1, cols] = 0
    ids[mask == 0] = 0
    return ids, mask


def images(rng, sizes, shape):
    return (rng.standard_normal((sizes["batch"],) + shape) * 1.5).astype(np.float32)


# ---------------------------------------------------------------- shared layers
class Mlp(nn.Module):
    def __init__(self, d, hidden, act):
        super().__init__()
        self.fc1 = nn.Linear(d, hidden)
        self.act = act
        self.fc2 = nn.Linear(hidden, d)

    def forward(self, x):
        return self.fc2(self.act(self.fc1(x)))


class LinearAct(nn.Module):
    def __init__(self, cin, cout, act):
        super().__init__()
        self.fc = nn.Linear(cin, cout)
        self.act = act

    def forward(self, x):
        return self.act(self.fc(x))


class RMSNorm(nn.Module):
    """Zhang & Sennrich 2019 (arXiv:1910.07467)."""

    def __init__(self, d, eps=1e-6):
        super().__init__()
        self.weight = nn.Parameter(1.0 + 0.1 * torch.randn(d))
        self.eps = eps

    def forward(self, x):
        return x * torch.rsqrt(x.pow(2).mean(-1, keepdim=True) + self.eps) * self.weight


# ---------------------------------------------------------------- solar-crack
def randomise_batch_norms(net):
    """Seeded statistics and affine terms, so eval-mode batch norms are not identities."""
    for m in net.modules():
        if isinstance(m, nn.BatchNorm2d):
            with torch.no_grad():
                m.running_mean.uniform_(-0.3, 0.3)
                m.running_var.uniform_(0.5, 1.5)
                m.weight.uniform_(0.7, 1.3)
                m.bias.uniform_(-0.2, 0.2)


class ConvNormAct(nn.Module):
    def __init__(self, cin, cout, k, stride=1, groups=1, act=None):
        super().__init__()
        self.conv = nn.Conv2d(cin, cout, k, stride, k // 2, groups=groups, bias=False)
        self.norm = nn.BatchNorm2d(cout)
        self.act = act or nn.Identity()

    def forward(self, x):
        return self.act(self.norm(self.conv(x)))


class SqueezeExcite(nn.Module):
    """Hu et al. 2018 (arXiv:1709.01507), with SiLU inside as EfficientNet has it."""

    def __init__(self, channels, reduced):
        super().__init__()
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.reduce = nn.Conv2d(channels, reduced, 1)
        self.act = nn.SiLU()
        self.expand = nn.Conv2d(reduced, channels, 1)
        self.gate = nn.Sigmoid()

    def forward(self, x):
        return x * self.gate(self.expand(self.act(self.reduce(self.pool(x)))))


class InvertedResidual(nn.Module):
    def __init__(self, c, expanded):
        super().__init__()
        self.expand = ConvNormAct(c, expanded, 1, act=nn.SiLU())
        self.depthwise = ConvNormAct(expanded, expanded, 3, groups=expanded, act=nn.SiLU())
        self.se = SqueezeExcite(expanded, expanded // 4)
        self.project = ConvNormAct(expanded, c, 1)

    def forward(self, x):
        return x + self.project(self.se(self.depthwise(self.expand(x))))


class SolarCrack(nn.Module):
    def __init__(self):
        super().__init__()
        self.stem = ConvNormAct(3, 16, 3, stride=2, act=nn.SiLU())
        self.block = InvertedResidual(16, 32)
        self.head_conv = ConvNormAct(16, 32, 1, act=nn.Hardswish())
        self.pool = nn.AdaptiveAvgPool2d(1)
        self.classifier = nn.Linear(32, 2)

    def forward(self, panel_image):
        x = self.head_conv(self.block(self.stem(panel_image)))
        return self.classifier(torch.flatten(self.pool(x), 1))


def solar_crack():
    net = SolarCrack()
    randomise_batch_norms(net)
    return Scenario(
        "solar-crack", "rooftop-solar-panel crack detector (conv, squeeze-excitation)", net,
        inputs=[("panel_image", np.float32, ["batch", 3, 32, 32])],
        outputs=[("crack_logits", np.float32, ["batch", 2])],
        sets=image_sets(),
        feeds=lambda rng, sizes: {"panel_image": images(rng, sizes, (3, 32, 32))},
        sites=[Site("stem.act", "silu"), Site("block.expand.act", "silu"),
               Site("block.depthwise.act", "silu"), Site("block.se.act", "silu"),
               Site("block.se.gate", "sigmoid"), Site("head_conv.act", "hard_swish")],
        near_misses=[{
            "block": "block.se", "output": ("block.se", "out"),
            "inputs": [("block.se", "in"), ("block.se.gate", "in")],
            "not_kinds": ["silu", "swish"],
            "reason": "x*sigmoid(s): squeeze-excitation scales x by the sigmoid of "
                      "another tensor (pooled and projected)"}],
    )


# ---------------------------------------------------------------- ferry-intent
class PreNormEncoderLayer(nn.Module):
    """Pre-norm transformer encoder layer (Xiong et al. 2020, arXiv:2002.04745) with a
    GELU MLP; keys where `keep` is False are masked. Written out rather than
    nn.TransformerEncoderLayer, whose nn.MultiheadAttention the TorchScript exporter
    traces with the example's sizes fixed in a Reshape."""

    def __init__(self, d, heads, ff):
        super().__init__()
        self.heads, self.head_dim = heads, d // heads
        self.attn_norm = nn.LayerNorm(d)
        self.qkv = nn.Linear(d, 3 * d)
        self.out = nn.Linear(d, d)
        self.mlp_norm = nn.LayerNorm(d)
        self.mlp = Mlp(d, ff, nn.GELU())

    def forward(self, x, keep):
        b, s, d = x.shape
        q, k, v = self.qkv(self.attn_norm(x)).view(b, s, 3, self.heads, self.head_dim) \
            .permute(2, 0, 3, 1, 4).unbind(0)
        a = F.scaled_dot_product_attention(q, k, v, attn_mask=keep[:, None, None, :])
        x = x + self.out(a.transpose(1, 2).reshape(b, s, d))
        return x + self.mlp(self.mlp_norm(x))


class FerryIntent(nn.Module):
    def __init__(self, vocab=120, d=32, heads=4, ff=64, max_len=16):
        super().__init__()
        self.embed = nn.Embedding(vocab, d, padding_idx=0)
        self.position = nn.Embedding(max_len, d)
        self.layer = PreNormEncoderLayer(d, heads, ff)
        self.norm = nn.LayerNorm(d)
        self.head = nn.Linear(d, 4)

    def forward(self, input_ids, attention_mask):
        positions = torch.arange(input_ids.shape[1], device=input_ids.device)
        h = self.embed(input_ids) + self.position(positions)[None]
        h = self.norm(self.layer(h, attention_mask))
        keep = attention_mask.unsqueeze(-1).to(h.dtype)
        return self.head((h * keep).sum(1) / keep.sum(1))


def ferry_feeds(rng, sizes):
    ids, mask = token_ids(rng, sizes, 120, pad_left=False)
    return {"input_ids": ids, "attention_mask": mask.astype(bool)}


def ferry_intent():
    return Scenario(
        "ferry-intent", "harbour-ferry message classifier (pre-norm encoder layer, GELU)",
        FerryIntent(),
        inputs=[("input_ids", np.int64, ["batch", "seq"]),
                ("attention_mask", np.bool_, ["batch", "seq"])],
        outputs=[("intent_logits", np.float32, ["batch", 4])],
        sets=text_sets(), feeds=ferry_feeds,
        sites=[Site("layer.mlp.act", "gelu")],
    )


# ---------------------------------------------------------------- ship-log
def rotate_half(x):
    x1, x2 = x.chunk(2, dim=-1)
    return torch.cat((-x2, x1), dim=-1)


class RotaryAttention(nn.Module):
    """Causal self-attention with rotary position embeddings (Su et al. 2021,
    arXiv:2104.09864), masked where `allowed` is False."""

    def __init__(self, d, heads):
        super().__init__()
        self.heads, self.head_dim = heads, d // heads
        self.q = nn.Linear(d, d, bias=False)
        self.k = nn.Linear(d, d, bias=False)
        self.v = nn.Linear(d, d, bias=False)
        self.o = nn.Linear(d, d, bias=False)
        inv_freq = 1.0 / (10000 ** (torch.arange(0, self.head_dim, 2).float() / self.head_dim))
        self.register_buffer("inv_freq", inv_freq, persistent=False)

    def forward(self, h, position_ids, allowed):
        b, s, d = h.shape
        freqs = position_ids[:, :, None].float() * self.inv_freq
        emb = torch.cat((freqs, freqs), dim=-1)
        cos, sin = emb.cos()[:, None], emb.sin()[:, None]

        def heads(t):
            return t.view(b, s, self.heads, self.head_dim).transpose(1, 2)

        q, k, v = heads(self.q(h)), heads(self.k(h)), heads(self.v(h))
        q = q * cos + rotate_half(q) * sin
        k = k * cos + rotate_half(k) * sin
        scores = q @ k.transpose(-1, -2) / math.sqrt(self.head_dim)
        scores = scores.masked_fill(~allowed, torch.finfo(scores.dtype).min)
        out = torch.softmax(scores, dim=-1) @ v
        return self.o(out.transpose(1, 2).reshape(b, s, d))


class SwiGLU(nn.Module):
    """Shazeer 2020 (arXiv:2002.05202): down(silu(gate(x)) * up(x))."""

    def __init__(self, d, hidden):
        super().__init__()
        self.gate = nn.Linear(d, hidden, bias=False)
        self.up = nn.Linear(d, hidden, bias=False)
        self.act = nn.SiLU()
        self.down = nn.Linear(hidden, d, bias=False)

    def forward(self, x):
        return self.down(self.act(self.gate(x)) * self.up(x))


class ShipLog(nn.Module):
    def __init__(self, vocab=96, d=32, heads=4, hidden=64):
        super().__init__()
        self.embed = nn.Embedding(vocab, d)
        self.attn_norm = RMSNorm(d)
        self.attn = RotaryAttention(d, heads)
        self.mlp_norm = RMSNorm(d)
        self.mlp = SwiGLU(d, hidden)
        self.final_norm = RMSNorm(d)
        self.lm_head = nn.Linear(d, vocab, bias=False)

    def forward(self, input_ids, attention_mask):
        # Position ids as left-padded decoders compute them: a running count of real tokens.
        position_ids = attention_mask.cumsum(-1) - 1
        position_ids = position_ids.masked_fill(attention_mask == 0, 1)
        s = input_ids.shape[1]
        causal = torch.ones(s, s, dtype=torch.bool, device=input_ids.device).tril()
        allowed = causal[None, None] & attention_mask[:, None, None, :].bool()
        h = self.embed(input_ids)
        h = h + self.attn(self.attn_norm(h), position_ids, allowed)
        h = h + self.mlp(self.mlp_norm(h))
        return self.lm_head(self.final_norm(h))


def ship_log():
    return Scenario(
        "ship-log", "ship-log summariser (decoder layer: rotary, causal mask, cumsum "
                    "position ids, SwiGLU)", ShipLog(),
        inputs=[("input_ids", np.int64, ["batch", "seq"]),
                ("attention_mask", np.int64, ["batch", "seq"])],
        outputs=[("next_token_logits", np.float32, ["batch", "seq", 96])],
        sets=text_sets(),
        feeds=lambda rng, sizes: dict(zip(("input_ids", "attention_mask"),
                                          token_ids(rng, sizes, 96, pad_left=True))),
        sites=[Site("mlp.act", "silu")],
        near_misses=[{
            "block": "mlp", "output": ("mlp.down", "in"),
            "inputs": [("mlp.up", "out"), ("mlp.act", "in")],
            "not_kinds": ["silu", "swish"],
            "reason": "SwiGLU product silu(gate)*up: only silu(gate) is an activation"}],
    )


class ShipLogUnpadded(ShipLog):
    """The same decoder exported for unpadded batches: input_ids only, every position a
    real token. The mask is computed from the sequence length (a Range), so the
    cumulative sum of the position ids reads a tensor that depends on the input's
    shape alone."""

    def forward(self, input_ids):
        s = input_ids.shape[1]
        keep = (torch.arange(s, device=input_ids.device)[None, :] >= 0).long()
        return super().forward(input_ids, keep.expand_as(input_ids))


def ship_log_unpadded():
    sc = ship_log()
    sc.id = "ship-log-unpadded"
    sc.description = ("ship-log summariser exported for unpadded batches (input_ids only; "
                      "the mask comes from the sequence length)")
    sc.net = ShipLogUnpadded()
    sc.inputs = sc.inputs[:1]
    sc.feeds = lambda rng, sizes: {"input_ids": rng.integers(
        1, 96, size=(sizes["batch"], sizes["seq"]), dtype=np.int64)}
    return sc


# ---------------------------------------------------------------- reef-survey
def window_partition(x, w):
    b, h, wd, c = x.shape
    x = x.view(b, h // w, w, wd // w, w, c).permute(0, 1, 3, 2, 4, 5)
    return x.reshape(-1, w * w, c)


def window_reverse(windows, w, h, wd):
    c = windows.shape[-1]
    x = windows.view(-1, h // w, wd // w, w, w, c).permute(0, 1, 3, 2, 4, 5)
    return x.reshape(-1, h, wd, c)


class WindowAttention(nn.Module):
    """Window self-attention with a relative position bias table (Liu et al. 2021,
    arXiv:2103.14030)."""

    def __init__(self, d, heads, w):
        super().__init__()
        self.heads, self.scale = heads, (d // heads) ** -0.5
        self.qkv = nn.Linear(d, 3 * d)
        self.proj = nn.Linear(d, d)
        self.bias_table = nn.Parameter(0.5 * torch.randn((2 * w - 1) ** 2, heads))
        coords = torch.stack(torch.meshgrid(torch.arange(w), torch.arange(w), indexing="ij"))
        coords = coords.flatten(1)
        rel = (coords[:, :, None] - coords[:, None, :]).permute(1, 2, 0) + (w - 1)
        self.register_buffer("bias_index", rel[..., 0] * (2 * w - 1) + rel[..., 1],
                             persistent=False)

    def forward(self, x, mask):
        bw, n, c = x.shape
        qkv = self.qkv(x).reshape(bw, n, 3, self.heads, c // self.heads).permute(2, 0, 3, 1, 4)
        q, k, v = qkv.unbind(0)
        attn = (q * self.scale) @ k.transpose(-2, -1)
        bias = self.bias_table[self.bias_index.view(-1)].view(n, n, -1).permute(2, 0, 1)
        attn = attn + bias[None]
        if mask is not None:
            nw = mask.shape[0]
            attn = attn.view(bw // nw, nw, self.heads, n, n) + mask[None, :, None]
            attn = attn.view(-1, self.heads, n, n)
        out = (attn.softmax(-1) @ v).transpose(1, 2).reshape(bw, n, c)
        return self.proj(out)


class WindowBlock(nn.Module):
    def __init__(self, d, heads, size, w, shift):
        super().__init__()
        self.size, self.w, self.shift = size, w, shift
        self.norm1 = nn.LayerNorm(d)
        self.attn = WindowAttention(d, heads, w)
        self.norm2 = nn.LayerNorm(d)
        self.mlp = Mlp(d, 2 * d, nn.GELU())
        self.register_buffer("attn_mask", self.shift_mask() if shift else None,
                             persistent=False)

    def shift_mask(self):
        """-100 between tokens that the cyclic shift brought from different regions."""
        h = wd = self.size
        region = torch.zeros(1, h, wd, 1)
        cuts = (slice(0, -self.w), slice(-self.w, -self.shift), slice(-self.shift, None))
        label = 0
        for hs in cuts:
            for ws in cuts:
                region[:, hs, ws, :] = label
                label += 1
        windows = window_partition(region, self.w).squeeze(-1)
        diff = windows[:, None, :] - windows[:, :, None]
        return diff.masked_fill(diff != 0, -100.0).masked_fill(diff == 0, 0.0)

    def forward(self, x):
        b, n, c = x.shape
        h = self.norm1(x).view(b, self.size, self.size, c)
        if self.shift:
            h = torch.roll(h, shifts=(-self.shift, -self.shift), dims=(1, 2))
        h = self.attn(window_partition(h, self.w), self.attn_mask)
        h = window_reverse(h, self.w, self.size, self.size)
        if self.shift:
            h = torch.roll(h, shifts=(self.shift, self.shift), dims=(1, 2))
        x = x + h.reshape(b, n, c)
        return x + self.mlp(self.norm2(x))


class ReefSurvey(nn.Module):
    def __init__(self, d=32):
        super().__init__()
        self.patch = nn.Conv2d(3, d, 4, stride=4)
        self.norm = nn.LayerNorm(d)
        self.blocks = nn.ModuleList([WindowBlock(d, 2, 8, 4, 0), WindowBlock(d, 2, 8, 4, 2)])
        self.final_norm = nn.LayerNorm(d)
        self.head = nn.Linear(d, 6)

    def forward(self, survey_image):
        x = self.norm(self.patch(survey_image).flatten(2).transpose(1, 2))
        for block in self.blocks:
            x = block(x)
        return self.head(self.final_norm(x).mean(1))


def reef_survey():
    return Scenario(
        "reef-survey", "coral-reef survey tagger (windowed attention, shifted windows, GELU)",
        ReefSurvey(),
        inputs=[("survey_image", np.float32, ["batch", 3, 32, 32])],
        outputs=[("reef_logits", np.float32, ["batch", 6])],
        sets=image_sets(),
        feeds=lambda rng, sizes: {"survey_image": images(rng, sizes, (3, 32, 32))},
        sites=[Site("blocks.0.mlp.act", "gelu"), Site("blocks.1.mlp.act", "gelu")],
    )


# ---------------------------------------------------------------- allotment-diary
def relative_position_bucket(relative_position, num_buckets, max_distance):
    """Bidirectional relative-position buckets (Raffel et al. 2020, arXiv:1910.10683),
    written the way the common T5 implementation writes them: sign, then Abs of the
    int64 distance, Cast to float for the logarithmic part."""
    num_buckets //= 2
    buckets = (relative_position > 0).to(torch.long) * num_buckets
    relative_position = torch.abs(relative_position)
    max_exact = num_buckets // 2
    is_small = relative_position < max_exact
    large = max_exact + (
        torch.log(relative_position.float() / max_exact)
        / math.log(max_distance / max_exact) * (num_buckets - max_exact)).to(torch.long)
    large = torch.min(large, torch.full_like(large, num_buckets - 1))
    return buckets + torch.where(is_small, relative_position, large)


class T5Attention(nn.Module):
    def __init__(self, d, heads, buckets=None, max_distance=16):
        super().__init__()
        self.heads, self.head_dim = heads, d // heads
        self.q = nn.Linear(d, d, bias=False)
        self.k = nn.Linear(d, d, bias=False)
        self.v = nn.Linear(d, d, bias=False)
        self.o = nn.Linear(d, d, bias=False)
        self.buckets, self.max_distance = buckets, max_distance
        if buckets:
            self.relative_bias = nn.Embedding(buckets, heads)

    def position_bias(self, s, device):
        context = torch.arange(s, dtype=torch.long, device=device)[:, None]
        memory = torch.arange(s, dtype=torch.long, device=device)[None, :]
        bucket = relative_position_bucket(memory - context, self.buckets, self.max_distance)
        return self.relative_bias(bucket).permute(2, 0, 1)[None]

    def forward(self, h, mask_bias, bias):
        b, s, d = h.shape

        def heads(t):
            return t.view(b, s, self.heads, self.head_dim).transpose(1, 2)

        q, k, v = heads(self.q(h)), heads(self.k(h)), heads(self.v(h))
        if bias is None:
            bias = self.position_bias(s, h.device) + mask_bias
        scores = q @ k.transpose(-1, -2) + bias  # no 1/sqrt(d) in T5
        out = torch.softmax(scores, dim=-1) @ v
        return self.o(out.transpose(1, 2).reshape(b, s, d)), bias


class ReluFeedForward(nn.Module):
    def __init__(self, d, hidden):
        super().__init__()
        self.wi = nn.Linear(d, hidden, bias=False)
        self.act = nn.ReLU()
        self.wo = nn.Linear(hidden, d, bias=False)

    def forward(self, x):
        return self.wo(self.act(self.wi(x)))


class GatedGeluFeedForward(nn.Module):
    def __init__(self, d, hidden):
        super().__init__()
        self.wi_0 = nn.Linear(d, hidden, bias=False)
        self.wi_1 = nn.Linear(d, hidden, bias=False)
        self.act = nn.GELU(approximate="tanh")
        self.wo = nn.Linear(hidden, d, bias=False)

    def forward(self, x):
        return self.wo(self.act(self.wi_0(x)) * self.wi_1(x))


class T5Layer(nn.Module):
    def __init__(self, d, heads, ff, buckets=None):
        super().__init__()
        self.attn_norm = RMSNorm(d)
        self.attn = T5Attention(d, heads, buckets)
        self.ff_norm = RMSNorm(d)
        self.ff = ff

    def forward(self, h, mask_bias, bias):
        a, bias = self.attn(self.attn_norm(h), mask_bias, bias)
        h = h + a
        return h + self.ff(self.ff_norm(h)), bias


class AllotmentDiary(nn.Module):
    def __init__(self, vocab=100, d=32, heads=4, hidden=64):
        super().__init__()
        self.embed = nn.Embedding(vocab, d)
        self.layers = nn.ModuleList([
            T5Layer(d, heads, ReluFeedForward(d, hidden), buckets=8),
            T5Layer(d, heads, GatedGeluFeedForward(d, hidden)),
        ])
        self.final_norm = RMSNorm(d)
        self.head = nn.Linear(d, 5)

    def forward(self, input_ids, attention_mask):
        keep = attention_mask.to(torch.float32)
        mask_bias = (1.0 - keep[:, None, None, :]) * torch.finfo(torch.float32).min
        h, bias = self.embed(input_ids), None
        for layer in self.layers:  # the first layer's bias is reused, as in T5
            h, bias = layer(h, mask_bias, bias)
        h = self.final_norm(h) * keep[..., None]
        return self.head(h.sum(1) / keep.sum(1, keepdim=True))


def allotment_diary():
    return Scenario(
        "allotment-diary", "allotment-diary topic tagger (T5-style encoder, int64 "
                           "relative-position buckets)", AllotmentDiary(),
        inputs=[("input_ids", np.int64, ["batch", "seq"]),
                ("attention_mask", np.int64, ["batch", "seq"])],
        outputs=[("topic_logits", np.float32, ["batch", 5])],
        sets=text_sets(),
        feeds=lambda rng, sizes: dict(zip(("input_ids", "attention_mask"),
                                          token_ids(rng, sizes, 100, pad_left=False))),
        sites=[Site("layers.0.ff.act", "relu"), Site("layers.1.ff.act", "gelu_tanh")],
        near_misses=[{
            "block": "layers.1.ff", "output": ("layers.1.ff.wo", "in"),
            "inputs": [("layers.1.ff.act", "in"), ("layers.1.ff.wi_1", "out")],
            "not_kinds": ["gelu_tanh", "gelu"],
            "reason": "gated GELU product gelu_tanh(wi_0 x) * wi_1 x: only the first "
                      "factor is an activation"}],
    )


# ---------------------------------------------------------------- loom-mlp
TINY_BIAS = 2.5e-6
BIASES = ("zero", "tiny", "normal")
MLP_ACTS = [
    ("gelu", nn.GELU, "gelu", {}),
    ("silu", nn.SiLU, "silu", {}),
    ("swish", lambda: ScaledSwish(1.702), "swish", {"beta": f32(1.702)}),
    ("hardswish", nn.Hardswish, "hard_swish", {}),
]


def set_bias(linear, how):
    """zero: zeros; tiny: normal with std 1e-6 (a common ViT MLP init) rescaled so
    max |b| is exactly 2.5e-6 in float32; normal: torch's default init."""
    with torch.no_grad():
        if how == "zero":
            linear.bias.zero_()
        elif how == "tiny":
            b = torch.randn(linear.bias.shape)
            linear.bias.copy_(b / b.abs().max() * TINY_BIAS)


class LoomMlp(nn.Module):
    def __init__(self, d=32):
        super().__init__()
        self.blocks = nn.ModuleList()
        for how in BIASES:
            for _, make, _, _ in MLP_ACTS:
                block = LinearAct(d, d, make())
                set_bias(block.fc, how)
                self.blocks.append(block)
        self.head = nn.Linear(d, 3)

    def forward(self, patch_tokens):
        x = patch_tokens
        for block in self.blocks:
            x = block(x)
        return self.head(x)


def loom_mlp():
    sites = [Site(f"blocks.{i}.act", kind, params, {"bias_init": how})
             for i, (how, (_, _, kind, params)) in enumerate(
                 (h, a) for h in BIASES for a in MLP_ACTS)]
    return Scenario(
        "loom-mlp", "loom-fabric defect tagger, ViT-style MLPs with zero, tiny and normal "
                    "biases", LoomMlp(),
        inputs=[("patch_tokens", np.float32, ["batch", "tokens", 32])],
        outputs=[("defect_logits", np.float32, ["batch", "tokens", 3])],
        sets=[("b2-t12", {"batch": 2, "tokens": 12}), ("b1-t7", {"batch": 1, "tokens": 7})],
        feeds=lambda rng, sizes: {"patch_tokens": (3.0 * rng.standard_normal(
            (sizes["batch"], sizes["tokens"], 32))).astype(np.float32)},
        sites=sites,
    )


# ---------------------------------------------------------------- turbine-icing
SOFTPLUS = [(2.0, 5.0), (0.5, 1.0)]
TS_SOFTPLUS = ("the TorchScript exporter writes Div(Softplus(Mul(x, beta)), beta) and drops "
               "torch's threshold (torch.onnx symbolic_opset9.softplus): above it the file "
               "differs from torch by up to log1p(exp(-threshold))/beta")


def softplus_site(i, beta, threshold):
    return Site(f"{i}.act", "softplus", {"beta": beta, "threshold": threshold},
                ts_params={"beta": beta, "threshold": None}, ts_note=TS_SOFTPLUS)


def turbine_icing():
    d = 24
    acts = [nn.Softplus(beta, threshold) for beta, threshold in SOFTPLUS]
    acts += [nn.SiLU(), nn.GELU(), nn.Hardswish()]
    net = nn.Sequential(*[LinearAct(d, d, act) for act in acts], nn.Linear(d, 2))
    with torch.no_grad():  # wide softplus inputs: every input set crosses the thresholds
        for block in net[:len(SOFTPLUS)]:
            block.fc.weight.mul_(3.0)
    sites = [softplus_site(i, b, t) for i, (b, t) in enumerate(SOFTPLUS)]
    sites += [Site(f"{i + 2}.act", kind) for i, kind in enumerate(("silu", "gelu", "hard_swish"))]
    return Scenario(
        "turbine-icing", "wind-turbine icing estimator (Linear MLP; softplus with beta and "
                         "threshold)", net,
        inputs=[("blade_sensors", np.float32, ["batch", d])],
        outputs=[("icing_risk", np.float32, ["batch", 2])],
        sets=[("b4", {"batch": 4}), ("b1", {"batch": 1})],
        feeds=lambda rng, sizes: {"blade_sensors": (3.0 * rng.standard_normal(
            (sizes["batch"], d))).astype(np.float32)},
        sites=sites,
        exports=EXPORTS + NOOPT_EXPORTS,
    )


SCENARIOS = [solar_crack, ferry_intent, ship_log, ship_log_unpadded, reef_survey,
             allotment_diary, loom_mlp, turbine_icing]


# ---------------------------------------------------------------- all tensor values
def tensor_types(model):
    """Element type of every typed value (graph inputs/outputs and value_info after
    onnx shape inference)."""
    inferred = onnx.shape_inference.infer_shapes(model)
    g = inferred.graph
    types = {}
    for vi in list(g.input) + list(g.output) + list(g.value_info):
        if vi.type.HasField("tensor_type"):
            types[vi.name] = vi.type.tensor_type.elem_type
    return types


def all_values(path, model, feeds):
    """onnxruntime values of every node output (optimisations off) and of the inputs."""
    types = tensor_types(model)
    names = [o for n in model.graph.node for o in n.output if o]
    missing = [t for t in names if t not in types]
    assert not missing, f"no element type for {missing[:5]}"
    sess = session_with_outputs(path, names, types)
    vals = dict(zip([o.name for o in sess.get_outputs()], sess.run(None, feeds)))
    vals.update(feeds)
    return vals, types


# ---------------------------------------------------------------- locating probes by value
def ancestors(g, tensor):
    out, stack = set(), [tensor]
    while stack:
        t = stack.pop()
        if t in out:
            continue
        out.add(t)
        i = g.producer.get(t)
        if i is not None:
            stack.extend(x for x in g.nodes[i].input if x)
    return out


def distance(value, probe):
    """max |onnx - torch| relative to max(1, max |torch|); None when not comparable."""
    if value.size != probe.size or value.dtype.kind != "f":
        return None
    a = value.reshape(probe.shape).astype(np.float64)
    return float(np.max(np.abs(a - probe))) / max(1.0, float(np.max(np.abs(probe))))


def order(g, tensor):
    """Position of a tensor's producer (graph inputs and initializers first)."""
    return g.producer.get(tensor, -1)


def closest(vals, names, probe, what):
    """The tensors among `names` that hold the probe's values: those within MATCH, and
    of these the ones no farther than TIE from the closest (equal copies tie; a tail
    that differs only on some elements, like torch's softplus threshold, does not)."""
    found = {t: d for t in names if (d := distance(vals[t], probe)) is not None and d <= MATCH}
    assert found, f"{what}: no tensor holds the value"
    best = min(found.values())
    return [t for t, d in found.items() if d <= best + TIE]


def find_output(g, vals, probe, what):
    """The earliest tensor holding the module's output."""
    hits = closest(vals, [t for t in vals if t not in g.inits], probe, what)
    return min(hits, key=lambda t: order(g, t))


def find_input(g, vals, probe, output, what):
    """The latest ancestor of `output` holding the module's input."""
    above = [t for t in ancestors(g, output) - {output} if t in vals and t not in g.inits]
    hits = closest(vals, above, probe, f"{what} (ancestors of {output})")
    return max(hits, key=lambda t: order(g, t))


def capture(net, feeds, modules, exported=None):
    """Input and output of each named module on one forward pass (float64 numpy).
    `exported` maps a module to (kind, params) the file computes instead of torch's
    own function: the module's output is replaced by that formula's, so the values
    downstream are the file's too."""
    named = dict(net.named_modules())
    exported = exported or {}
    seen, hooks = {}, []
    for name in modules:
        def hook(_m, args, out, name=name):
            assert name not in seen, f"{name} ran twice"
            x = args[0].detach().double().numpy()
            if name in exported:
                y = reference(*exported[name], x)
                out = torch.from_numpy(y.astype(np.float32))
            seen[name] = (x, out.detach().double().numpy())
            return out
        hooks.append(named[name].register_forward_hook(hook))
    net(*[torch.from_numpy(v) for v in feeds.values()])
    for h in hooks:
        h.remove()
    return seen


def probe_value(captured, probe):
    module, side = probe
    return captured[module][0 if side == "in" else 1]


# ---------------------------------------------------------------- truth
def bias_before(g, x_in):
    """The bias Add that produces a site's input, with its constant operand (followed
    through the Identity nodes by which the TorchScript exporter shares equal
    initializers)."""
    i = g.producer.get(x_in)
    if i is None or g.nodes[i].op_type != "Add":
        return None
    node = g.nodes[i]
    for operand in node.input:
        source = operand
        while source in g.producer and g.nodes[g.producer[source]].op_type == "Identity":
            source = g.nodes[g.producer[source]].input[0]
        v = g.const_value(source)
        if v is not None and v.dtype.kind == "f" and v.size > 1:
            v = v.astype(np.float64).ravel()
            return {"node": node.name, "constant": operand, "initializer": source,
                    "max_abs": float(np.max(np.abs(v))), "values": [float(x) for x in v]}
    return None


def integer_lookalikes(g, types):
    """Integer-typed nodes of ops that alone can have an activation's shape."""
    out = []
    for i, n in enumerate(g.nodes):
        t = types.get(n.output[0]) if n.output else None
        if n.op_type in LOOKALIKE_OPS and t in INTEGER_TYPES:
            readers = [g.nodes[j] for j in g.consumers.get(n.output[0], [])]
            out.append({"node": n.name, "index": i, "op_type": n.op_type,
                        "elem_type": elem_type_name(t),
                        "read_by": [f"{r.op_type} {r.name}" for r in readers]})
    return out


def truth(sc, g, vals, captured, exporter):
    sites = []
    for site in sc.sites:
        x_probe, y_probe = captured[site.module]
        params = site.params
        if exporter == "ts" and site.ts_params is not None:
            params = site.ts_params  # what the file computes (the probe holds it too)
        y_out = find_output(g, vals, y_probe, f"{site.module} output")
        x_in = find_input(g, vals, x_probe, y_out, f"{site.module} input")
        compute, constant = g.region([x_in], y_out)
        entry = site_entry(g, f"s{len(sites):02d}", site.module, site.kind, params, x_in,
                           y_out, compute, constant)
        entry.update(site.note)
        if params is not site.params:
            entry["torch_params"] = site.params
            entry["exporter_note"] = site.ts_note
        bias = bias_before(g, x_in)
        if bias:
            entry["bias_add"] = bias
        sites.append(entry)
    misses = []
    for m in sc.near_misses:
        y_out = find_output(g, vals, probe_value(captured, m["output"]), m["block"])
        inputs = [find_input(g, vals, probe_value(captured, p), y_out, m["block"])
                  for p in m["inputs"]]
        compute, _ = g.region(inputs, y_out)
        misses.append({
            "block": m["block"], "not_kinds": m["not_kinds"], "reason": m["reason"],
            "inputs": inputs, "output": y_out,
            "nodes": [g.nodes[i].name for i in compute], "node_indices": compute,
            "pattern": [g.nodes[i].op_type for i in compute]})
    return sites, misses


def check_all_sets(sites, misses, per_set_vals):
    """check_sites / check_near_misses on every input set; figures kept per set."""
    errs, diffs = {}, {}
    for name, vals in per_set_vals.items():
        check_sites(sites, vals)
        check_near_misses(misses, vals)
        for site in sites:
            if site["kind"] == "softplus":
                p = site.get("torch_params", site["params"])
                crossed = int(np.sum(vals[site["input"]] * p["beta"] > p["threshold"]))
                assert crossed, f"{name}: no input of {site['block']} crosses its threshold"
                site.setdefault("threshold_crossings", {})[name] = crossed
        errs[name] = [s.pop("reference_max_abs_err") for s in sites]
        diffs[name] = [m.pop("max_abs_diff_from_not_kinds") for m in misses]
    for k, s in enumerate(sites):
        s["reference_max_abs_err"] = {n: e[k] for n, e in errs.items()}
    for k, m in enumerate(misses):
        m["max_abs_diff_from_not_kinds"] = {n: d[k] for n, d in diffs.items()}


# ---------------------------------------------------------------- files
def write_npy(path, array):
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "wb") as f:
        np.lib.format.write_array(f, np.ascontiguousarray(array), allow_pickle=False)


def export_dims(sc):
    """{tensor: {axis: (dim name, min, max)}} of every named dim."""
    out = {}
    for name, _, shape in sc.inputs + sc.outputs:
        axes = {a: (d,) + DIM_RANGES[d] for a, d in enumerate(shape) if isinstance(d, str)}
        if axes:
            out[name] = axes
    return out


def dim_params_in_file(model):
    g = model.graph
    found = {"inputs": set(), "outputs": set(), "value_info": set()}
    for key, vis in (("inputs", g.input), ("outputs", g.output), ("value_info", g.value_info)):
        for vi in vis:
            for d in vi.type.tensor_type.shape.dim:
                if d.WhichOneof("value") == "dim_param":
                    found[key].add(d.dim_param)
    symbolic_vi = sum(1 for vi in g.value_info
                      if any(d.WhichOneof("value") == "dim_param"
                             for d in vi.type.tensor_type.shape.dim))
    return {k: sorted(v) for k, v in found.items()} | {"value_info_symbolic_count": symbolic_vi}


def input_sets(sc):
    rng = np.random.default_rng(INPUT_SEED)
    return [(name, sizes, sc.feeds(rng, sizes)) for name, sizes in sc.sets]


def run_sets(folder, path, model, sets, names_out, net=None):
    """Every tensor's values per input set, and the set's files: inputs, and outputs of
    onnxruntime with default session options (compared with torch's when `net`)."""
    per_set_vals, records = {}, []
    sess = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    for set_name, sizes, feeds in sets:
        per_set_vals[set_name], types = all_values(path, model, feeds)
        outs = dict(zip(names_out, sess.run(names_out, feeds)))
        diff = None
        if net is not None:
            ref = net(*[torch.from_numpy(v) for v in feeds.values()]).detach().numpy()
            diff = float(np.max(np.abs(outs[names_out[0]] - ref)))
        records.append(set_record(folder, set_name, sizes, feeds, outs, diff))
    return per_set_vals, records, types


def save_site_values(folder, record, vals, keys):
    """site_values/SET.npz of one input set (the smaller one: the files stay small)."""
    path = folder / "site_values" / f"{record['name']}.npz"
    path.parent.mkdir(exist_ok=True)
    save_npz(path, {k: vals[t] for k, t in keys.items()})
    record["site_values"] = path.relative_to(folder).as_posix()


def save_float64_copy(folder, set_name, name, array):
    path = folder / "inputs-float64" / set_name / f"{name}.npy"
    write_npy(path, array.astype(np.float64))
    return {"input": name, "set": set_name, "file": path.relative_to(folder).as_posix(),
            "of": f"inputs/{set_name}/{name}.npy"}


def set_record(folder, set_name, sizes, feeds, outs, torch_diff):
    rec = {"name": set_name, "dims": sizes, "inputs": {}, "outputs": {},
           "torch_vs_onnxruntime_max_abs": torch_diff}
    for name, arr in feeds.items():
        path = folder / "inputs" / set_name / f"{name}.npy"
        write_npy(path, arr)
        entry = {"file": path.relative_to(folder).as_posix(), "dtype": str(arr.dtype),
                 "shape": list(arr.shape)}
        if name in ("attention_mask",):
            entry["padding_zeros"] = int(np.sum(arr == 0))
        rec["inputs"][name] = entry
    for name, arr in outs.items():
        path = folder / "outputs" / set_name / f"{name}.npy"
        write_npy(path, arr)
        rec["outputs"][name] = {"file": path.relative_to(folder).as_posix(),
                                "dtype": str(arr.dtype), "shape": list(arr.shape)}
    return rec


# ---------------------------------------------------------------- per model
def build_model(factory, exporter, dynamo, opset, optimize):
    torch.manual_seed(TORCH_SEED)
    sc = factory()
    sc.net.eval()
    sets = input_sets(sc)
    folder = OUT / f"{sc.id}-{exporter}-op{opset}"
    folder.mkdir(parents=True)
    path = folder / "model.onnx"
    entry = {"id": folder.name, "scenario": sc.id, "description": sc.description,
             "exporter": exporter, "dynamo": dynamo, "opset_requested": opset,
             "dynamo_optimize": optimize, "do_constant_folding": None if dynamo else True}
    dims = export_dims(sc)
    example = tuple(torch.from_numpy(v) for v in sets[0][2].values())
    names_in = [n for n, _, _ in sc.inputs]
    names_out = [n for n, _, _ in sc.outputs]
    try:
        export(sc.net, example, names_in, names_out, path, dynamo, opset, optimize, dims)
    except Exception as e:  # recorded, not fatal
        shutil.rmtree(folder)
        entry["skipped"] = f"{type(e).__name__}: {str(e).splitlines()[0][:200]}"
        return entry
    extra = sorted(p.name for p in folder.iterdir() if p.name != "model.onnx")
    assert not extra, f"exporter wrote more files: {extra}"

    model = onnx.load(str(path))
    g = Graph(model)
    modules = sorted({s.module for s in sc.sites}
                     | {p[0] for m in sc.near_misses for p in [m["output"]] + m["inputs"]})
    per_set_vals, records, types = run_sets(folder, path, model, sets, names_out, sc.net)
    exported = {s.module: (s.kind, s.ts_params) for s in sc.sites
                if exporter == "ts" and s.ts_params is not None}
    captured = capture(sc.net, sets[0][2], modules, exported)
    sites, misses = truth(sc, g, per_set_vals[sets[0][0]], captured, exporter)
    check_all_sets(sites, misses, per_set_vals)

    tensors = sorted({t for s in sites for t in (s["input"], s["output"])}
                     | {t for m in misses for t in m["inputs"] + [m["output"]]})
    keys = {f"t{i:03d}": t for i, t in enumerate(tensors)}
    save_site_values(folder, records[-1], per_set_vals[records[-1]["name"]], keys)
    float_in = [n for n, dt, _ in sc.inputs if dt == np.float32]
    if float_in:
        set_name, _, feeds = sets[0]
        entry["float64_copy"] = save_float64_copy(folder, set_name, float_in[0],
                                                  feeds[float_in[0]])
    entry.update({
        "dynamic_dims": {n: {"min": DIM_RANGES[n][0], "max": DIM_RANGES[n][1]}
                         for n in sorted({d[0] for axes in dims.values()
                                          for d in axes.values()})},
        "dims_per_tensor": {t: {str(a): d[0] for a, d in axes.items()}
                            for t, axes in dims.items()},
        "dim_params_in_file": dim_params_in_file(model),
        "input_sets": records,
        "site_value_keys": keys,
        "expected_kind_counts": dict(sorted(Counter(s.kind for s in sc.sites).items())),
        "sites": sites,
        "near_misses": misses,
        "integer_lookalikes": integer_lookalikes(g, types),
        "info": info_figures(model),
    })
    entry.update(file_figures(path))
    return entry


# ---------------------------------------------------------------- garage-counts (onnx.helper)
def relu_int32_allowed():
    """The ONNX Relu schema (opset 14 and later) lists int32 among its types."""
    schema = onnx.defs.get_schema("Relu", 17)
    allowed = {t for c in schema.type_constraints for t in c.allowed_type_strs}
    assert "tensor(int32)" in allowed, allowed
    return schema.since_version


def garage_counts():
    """Built with onnx.helper: torch exports no integer Relu. An int32 Relu, an int64
    Abs then Cast (not activation sites of float kinds), and one float Relu site."""
    folder = OUT / "garage-counts-helper-op17"
    folder.mkdir(parents=True)
    since = relu_int32_allowed()
    nodes = [
        helper.make_node("Relu", ["car_delta"], ["arrivals"], name="arrivals_relu"),
        helper.make_node("Cast", ["arrivals"], ["arrivals_f"], name="arrivals_cast",
                         to=TensorProto.FLOAT),
        helper.make_node("Abs", ["slot_offset"], ["walk"], name="walk_abs"),
        helper.make_node("Cast", ["walk"], ["walk_f"], name="walk_cast", to=TensorProto.FLOAT),
        helper.make_node("Mul", ["walk_f", "walk_cost"], ["walk_load"], name="walk_mul"),
        helper.make_node("Add", ["arrivals_f", "walk_load"], ["demand"], name="demand_add"),
        helper.make_node("Sub", ["level", "demand"], ["spare"], name="spare_sub"),
        helper.make_node("Relu", ["spare"], ["free_spaces"], name="free_relu"),
    ]
    batch = "batch"
    graph = helper.make_graph(
        nodes, "garage_counts",
        [helper.make_tensor_value_info("car_delta", TensorProto.INT32, [batch, 8]),
         helper.make_tensor_value_info("slot_offset", TensorProto.INT64, [batch, 8]),
         helper.make_tensor_value_info("level", TensorProto.FLOAT, [batch, 8])],
        [helper.make_tensor_value_info("free_spaces", TensorProto.FLOAT, [batch, 8])],
        initializer=[helper.make_tensor("walk_cost", TensorProto.FLOAT, [], [0.25])])
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 17)],
                              ir_version=8, producer_name="gen_torch_blocks.onnx_helper")
    onnx.checker.check_model(model, full_check=True)
    path = folder / "model.onnx"
    onnx.save(model, str(path))
    g = Graph(model)

    rng = np.random.default_rng(INPUT_SEED)
    sets = []
    for set_name, b in (("b2", 2), ("b1", 1)):
        sets.append((set_name, {"batch": b}, {
            "car_delta": rng.integers(-5, 6, size=(b, 8)).astype(np.int32),
            "slot_offset": rng.integers(-20, 21, size=(b, 8)).astype(np.int64),
            "level": (6.0 + 4.0 * rng.standard_normal((b, 8))).astype(np.float32)}))
    c, k = g.region(["spare"], "free_spaces")
    sites = [site_entry(g, "s00", "free_relu", "relu", {}, "spare", "free_spaces", c, k)]
    per_set_vals, records, types = run_sets(folder, path, model, sets, ["free_spaces"])
    for (_, _, feeds), vals in zip(sets, per_set_vals.values()):
        assert vals["arrivals"].dtype == np.int32
        assert np.array_equal(vals["arrivals"], np.maximum(feeds["car_delta"], 0))
        assert np.array_equal(vals["walk"], np.abs(feeds["slot_offset"]))
    check_all_sets(sites, [], per_set_vals)
    keys = {"t000": "spare", "t001": "free_spaces"}
    save_site_values(folder, records[-1], per_set_vals[records[-1]["name"]], keys)
    entry = {
        "id": folder.name, "scenario": "garage-counts",
        "description": "parking-garage occupancy counter built with onnx.helper (integer "
                       "Relu and Abs; torch exports neither as such)",
        "exporter": "onnx.helper", "dynamo": None, "opset_requested": 17,
        "dynamo_optimize": None, "do_constant_folding": None,
        "float64_copy": save_float64_copy(folder, "b2", "level", sets[0][2]["level"]),
        "dynamic_dims": {"batch": None},
        "dims_per_tensor": {"car_delta": {"0": batch}, "slot_offset": {"0": batch},
                            "level": {"0": batch}, "free_spaces": {"0": batch}},
        "dim_params_in_file": dim_params_in_file(model),
        "input_sets": records, "site_value_keys": keys,
        "expected_kind_counts": {"relu": 1},
        "sites": sites, "near_misses": [],
        "integer_activations": [{
            "node": "arrivals_relu", "op_type": "Relu", "elem_type": "INT32",
            "input": "car_delta", "output": "arrivals",
            "source": f"ONNX Relu schema (since opset {since}) lists tensor(int32); "
                      "checked with onnx.defs.get_schema",
            "rule": "exact in int32: if reported, the site's element type is int32 and any "
                    "rewrite stays int32 and exact (an int32 zero, no float constants); "
                    "float forms and approximations do not apply"}],
        "integer_lookalikes": integer_lookalikes(g, types),
        "info": info_figures(model),
    }
    entry.update(file_figures(path))
    return entry


def main():
    torch.use_deterministic_algorithms(True)
    torch.set_num_threads(1)
    if OUT.exists():
        shutil.rmtree(OUT)
    OUT.mkdir(parents=True)
    models = []
    for factory in SCENARIOS:
        for exporter, dynamo, opset, optimize in factory().exports:
            e = build_model(factory, exporter, dynamo, opset, optimize)
            status = e.get("skipped") or (f"{len(e['sites'])} sites, "
                                          f"{len(e['near_misses'])} near misses, "
                                          f"{e['file_bytes']} bytes")
            print(f"{e['id']}: {status}", flush=True)
            models.append(e)
    models.append(garage_counts())
    manifest = {
        "generator": GENERATOR,
        "versions": versions(torch, onnxscript, onnx_ir),
        "seeds": {"torch.manual_seed (weights, before each model is built)": TORCH_SEED,
                  "numpy default_rng (inputs, per scenario)": INPUT_SEED},
        "exports": [{"exporter": e, "dynamo": d, "opset": o, "dynamo_optimize": opt}
                    for e, d, o, opt in EXPORTS + NOOPT_EXPORTS],
        "dynamic_dims": {
            "dynamo": "torch.export.Dim(name, min, max) per named dim, passed as "
                      "dynamic_shapes to torch.export.export(strict=False)",
            "ts": "dynamic_axes with the same names, inputs and outputs",
            "ranges": {k: list(v) for k, v in DIM_RANGES.items()}},
        "files": {
            "inputs": "inputs/SET/NAME.npy, one per model input; feed them with "
                      "--input NAME=FILE",
            "outputs": "outputs/SET/NAME.npy: onnxruntime CPU, default session options",
            "site_values": "site_values/SET.npz for the last input set only: onnxruntime "
                           "with ORT_DISABLE_ALL, keys in site_value_keys",
            "float64_copy": "inputs-float64/SET/NAME.npy: one float32 input as float64"},
        "site_check": {"against": "float64 formula on the site's onnxruntime input, every "
                                  "input set",
                       "rtol": REF_RTOL, "atol": REF_ATOL,
                       "formulas": "scripts/site_truth.py; each site names its source"},
        "location": {
            "how": "forward hooks on the torch activation modules; the ONNX tensor holding "
                   "the module's output is the earliest one with its values, the site input "
                   "the latest ancestor of it with the module input's values",
            "match": f"max |onnx - torch| <= {MATCH} * max(1, max |torch|); of the "
                     f"matching tensors, those within {TIE} (same scale) of the closest "
                     "are equal copies, of which the rule above picks one"},
        "rules": {
            "site": "nodes computing `output` from `input`; constant-only nodes are listed "
                    "apart in constant_nodes",
            "complete": "`sites` lists every activation of the torch module definition; "
                        "expected_kind_counts counts them by kind",
            "nested": "activation ops inside a larger site belong to that site",
            "near_miss": "no reported site may have the near miss's output with a kind in "
                         "not_kinds",
            "bias_add": "a site's input is the output of its bias Add (bias_add): the Add, "
                        "even of zeros or of a tiny bias, stays outside the site",
            "integer": "no reported site may contain an integer-typed node, except a node "
                       "of integer_activations reported with its integer element type; "
                       "integer_lookalikes lists the integer nodes whose op alone could "
                       "pass for an activation (Abs has leaky_relu alpha -1's values, but "
                       "on int64, before a Cast)",
        },
        "model_count": sum(1 for m in models if "skipped" not in m),
        "models": models,
    }
    write_json(OUT / "manifest.json", manifest)


if __name__ == "__main__":
    main()
