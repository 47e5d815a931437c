#!/usr/bin/env python3
"""Writes the raw anchor-head fixtures under testdata/onnx/ (a few KB each).

ONNX fixtures (layouts anchor-heads and anchor-heads-last): input [batch, 3,
64, 64]; two heads, stride 16 (4x4 cells) and stride 32 (2x2 cells), 2
anchors each, 3 classes (person, car, dog): 2 * (5 + 3) = 16 channels. The
coarse head is the first output, so the tests also check that heads are
paired with anchor groups by stride, not by output order. Graph as in
onnx_fixtures.py: images -> GlobalAveragePool -> 1x1 Conv (weights 0, bias
= the head's values) -> Reshape, so the outputs are fixed numbers.

Every value is a raw logit; everything not set below is -20 (sigmoid about
2e-9: nothing passes a threshold) except tx, ty, tw, th = 0. Set values:
  stride 16 head, anchor 1, cell (x=2, y=1): tx = ty = 0, tw = 0,
      th = ln 2, objectness ln 3, car ln 3
  stride 32 head, anchor 0, cell (x=1, y=0): tx = ln 3, ty = 0, tw = ln 2,
      th = 0, objectness 0, person ln 3
The expected boxes are worked by hand in rawhead_test.go.

Darknet fixture: darknet-tiny.cfg + darknet-tiny.weights, a 64x64 network
with two [yolo] heads (grids 16x16 and 8x8, scale_x_y 1.05 and 1.1) and
random weights (seed 14). The weights file is Darknet's: int32 major, minor,
revision, int64 images seen (major*10 + minor >= 2), then per convolutional
layer its biases, [batch-norm scales, rolling means, rolling variances],
weights, all float32 little-endian.

Needs onnx and numpy (Debian: apt install python3-onnx; run with
/usr/bin/python3). Run from the repository root:

    /usr/bin/python3 scripts/gen-rawhead-fixtures.py
"""
import math
import os
import struct

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "testdata", "onnx")
OPSET = 11
IR_VERSION = 6
A, C = 2, 3
K = 5 + C


def head_values(grid):
    """[A, K, grid, grid] filled with the default values."""
    v = np.full((A, K, grid, grid), -20.0, np.float32)
    v[:, 0:4] = 0
    return v


def heads():
    h16 = head_values(4)
    a, x, y = 1, 2, 1
    h16[a, 0, y, x], h16[a, 1, y, x] = 0, 0
    h16[a, 2, y, x], h16[a, 3, y, x] = 0, math.log(2)
    h16[a, 4, y, x] = math.log(3)
    h16[a, 5 + 1, y, x] = math.log(3)  # car
    h32 = head_values(2)
    a, x, y = 0, 1, 0
    h32[a, 0, y, x], h32[a, 1, y, x] = math.log(3), 0
    h32[a, 2, y, x], h32[a, 3, y, x] = math.log(2), 0
    h32[a, 4, y, x] = 0
    h32[a, 5 + 0, y, x] = math.log(3)  # person
    return h16, h32


def model(name, outputs, in_shape=("batch", 3, 64, 64)):
    """outputs: list of (name, shape without batch, values in that shape)."""
    nodes = [helper.make_node("GlobalAveragePool", ["images"], ["gap"])]
    inits, outs = [], []
    for oname, shape, vals in outputs:
        vals = np.asarray(vals, np.float32).reshape(-1)
        m = vals.size
        inits += [
            numpy_helper.from_array(np.zeros((m, 3, 1, 1), np.float32), oname + "_w"),
            numpy_helper.from_array(vals, oname + "_b"),
            numpy_helper.from_array(np.array([-1] + list(shape), np.int64), oname + "_shape"),
        ]
        nodes += [
            helper.make_node("Conv", ["gap", oname + "_w", oname + "_b"], [oname + "_conv"], kernel_shape=[1, 1]),
            helper.make_node("Reshape", [oname + "_conv", oname + "_shape"], [oname]),
        ]
        outs.append(helper.make_tensor_value_info(oname, TensorProto.FLOAT, ["batch"] + list(shape)))
    graph = helper.make_graph(nodes, name,
                              [helper.make_tensor_value_info("images", TensorProto.FLOAT, list(in_shape))],
                              outs, initializer=inits)
    m = helper.make_model(graph, producer_name="tallyd-fixtures", opset_imports=[helper.make_opsetid("", OPSET)])
    m.ir_version = IR_VERSION
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, name + ".onnx"))


def onnx_fixtures():
    h16, h32 = heads()
    # Channels first [A*K, H, W]: coarse head first.
    model("anchor-heads", [("out32", [A * K, 2, 2], h32.reshape(A * K, 2, 2)),
                           ("out16", [A * K, 4, 4], h16.reshape(A * K, 4, 4))])
    # Channels last [H, W, A*K].
    model("anchor-heads-last", [("out32", [2, 2, A * K], h32.transpose(2, 3, 0, 1).reshape(2, 2, A * K)),
                                ("out16", [4, 4, A * K], h16.transpose(2, 3, 0, 1).reshape(4, 4, A * K))])
    # 17 channels: no anchor count gives 5 + C values each.
    model("anchor-heads-bad", [("out16", [17, 4, 4], np.zeros((17, 4, 4)))])


DARKNET_CFG = """# tallyd test fixture: a tiny two-head YOLOv4-style network (random weights)
[net]
width=64
height=64
channels=3

[convolutional]
filters=8
size=3
stride=2
pad=1
activation=leaky

[convolutional]
batch_normalize=1
filters=8
size=3
stride=2
pad=1
activation=leaky

[convolutional]
filters=16
size=1
stride=1
pad=1
activation=linear

[yolo]
mask=0,1
anchors=10,14, 23,27, 37,58, 81,82
classes=3
num=4
scale_x_y=1.05
thresh=0

[route]
layers=-3

[maxpool]
size=2
stride=2

[convolutional]
filters=16
size=1
stride=1
pad=1
activation=linear

[yolo]
mask=2,3
anchors=10,14, 23,27, 37,58, 81,82
classes=3
num=4
scale_x_y=1.1
thresh=0
"""


def darknet_fixture():
    with open(os.path.join(OUT, "darknet-tiny.cfg"), "w") as f:
        f.write(DARKNET_CFG)
    rng = np.random.default_rng(14)
    with open(os.path.join(OUT, "darknet-tiny.weights"), "wb") as out:
        out.write(struct.pack("<iiiq", 0, 2, 0, 0))

        def conv(filters, channels, size, bn):
            out.write(rng.normal(0, 0.1, filters).astype("<f4").tobytes())
            if bn:
                out.write(rng.uniform(0.5, 1.5, filters).astype("<f4").tobytes())
                out.write(rng.normal(0, 0.1, filters).astype("<f4").tobytes())
                out.write(rng.uniform(0.5, 1.5, filters).astype("<f4").tobytes())
            out.write(rng.normal(0, 0.3, filters * channels * size * size).astype("<f4").tobytes())

        conv(8, 3, 3, False)
        conv(8, 8, 3, True)
        conv(16, 8, 1, False)
        conv(16, 8, 1, False)
    # A cfg without weights beside it, for the error test.
    with open(os.path.join(OUT, "darknet-noweights.cfg"), "w") as f:
        f.write(DARKNET_CFG)


def main():
    os.makedirs(OUT, exist_ok=True)
    onnx_fixtures()
    darknet_fixture()


if __name__ == "__main__":
    main()
