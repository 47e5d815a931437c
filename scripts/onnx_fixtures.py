#!/usr/bin/env python3
"""Writes the tiny ONNX fixture models under testdata/onnx/ (a few KB each).

Each fixture stands for one output layout of detect/onnx and produces a known
output tensor, so the Go tests can check that the decoders give exactly the
boxes meant. The outputs do not depend on the image except through its mean
brightness: a black frame gives the base rows, a white (255) frame adds
765/1024 = 0.7470703125 to a few chosen values (a class score), which lets a
batch test tell frames apart. Every value is exact in float32.

Graph of every fixture: images -> GlobalAveragePool -> 1x1 Conv (weights
2^-10 where a value follows the brightness, 0 elsewhere; bias = the base
values) -> Reshape to the layout's shape. Both inference engines (ONNX Runtime
and OpenCV DNN) run these operators.

Needs the onnx and numpy Python packages (Debian: apt install python3-onnx,
then run with /usr/bin/python3). CI does not run this; the outputs are
committed. Run from the repository root:

    /usr/bin/python3 scripts/onnx_fixtures.py
"""
import os

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "testdata", "onnx")
BRIGHT = 2.0 ** -10  # conv weight per channel; 3 channels * 255 * 2^-10 = 0.7470703125
OPSET = 11
IR_VERSION = 6


def model(name, outputs, in_shape, metadata=None):
    """outputs: list of (output name, layout shape without batch, base, mask)."""
    nodes = [helper.make_node("GlobalAveragePool", ["images"], ["gap"])]
    inits = []
    outs = []
    for oname, shape, base, mask in outputs:
        base = np.asarray(base, np.float32).reshape(shape)
        mask = np.asarray(mask, np.float32).reshape(shape)
        m = base.size
        w = np.zeros((m, 3, 1, 1), np.float32)
        w[:, :, 0, 0] = (mask.reshape(m, 1) * BRIGHT)
        inits += [
            numpy_helper.from_array(w, oname + "_w"),
            numpy_helper.from_array(base.reshape(m), oname + "_b"),
            numpy_helper.from_array(np.array([-1] + list(shape), np.int64), oname + "_shape"),
        ]
        nodes += [
            helper.make_node("Conv", ["gap", oname + "_w", oname + "_b"], [oname + "_conv"], kernel_shape=[1, 1]),
            helper.make_node("Reshape", [oname + "_conv", oname + "_shape"], [oname]),
        ]
        outs.append(helper.make_tensor_value_info(oname, TensorProto.FLOAT, ["batch"] + list(shape)))
    graph = helper.make_graph(
        nodes, name,
        [helper.make_tensor_value_info("images", TensorProto.FLOAT, in_shape)],
        outs, initializer=inits)
    m = helper.make_model(graph, producer_name="tallyd-fixtures",
                          opset_imports=[helper.make_opsetid("", OPSET)])
    m.ir_version = IR_VERSION
    for k, v in (metadata or {}).items():
        e = m.metadata_props.add()
        e.key, e.value = k, v
    onnx.checker.check_model(m)
    onnx.save(m, os.path.join(OUT, name + ".onnx"))


def bad_models():
    # Input of rank 3: the detector wants [batch, 3, height, width].
    g = helper.make_graph(
        [helper.make_node("Identity", ["images"], ["output"])], "rank3",
        [helper.make_tensor_value_info("images", TensorProto.FLOAT, [1, 3, 64])],
        [helper.make_tensor_value_info("output", TensorProto.FLOAT, [1, 3, 64])])
    m = helper.make_model(g, producer_name="tallyd-fixtures", opset_imports=[helper.make_opsetid("", OPSET)])
    m.ir_version = IR_VERSION
    onnx.save(m, os.path.join(OUT, "bad-rank3.onnx"))
    # Output [batch, 10]: fits no detection layout.
    model("bad-layout", [("output", [10], np.zeros(10), np.zeros(10))], ["batch", 3, 48, 64])
    with open(os.path.join(OUT, "not-onnx.onnx"), "w") as f:
        f.write("person\ncar\ndog\n")


def main():
    os.makedirs(OUT, exist_ok=True)
    with open(os.path.join(OUT, "fixture.names"), "w") as f:
        f.write("person\ncar\ndog\n")
    fixed = ["batch", 3, 48, 64]  # W=64, H=48: a 128x96 frame is scaled by exactly 0.5

    # b. rows-obj [B, 10, 5+3]: cx, cy, w, h (input px), objectness, 3 class
    # scores; rows 4..9 are zero (real models have far more rows than values
    # per row, which is how the automatic layout choice tells rows from
    # channels-first).
    rows = np.array([
        [16, 12, 8, 10, 0.5, 0.5, 0.25, 0],     # person 0.25
        [40, 24, 16, 20, 1.0, 0, 0.75, 0],      # car 0.75
        [41, 25, 16, 20, 1.0, 0, 0.5, 0],       # car 0.5, overlaps the row above: NMS drops it
        [56, 40, 8, 8, 0.25, 0, 0, 0],          # dog 0 (black) or 0.25*0.7470703125 (white)
    ])
    rows = np.vstack([rows, np.zeros((6, 8))])
    mask = np.zeros_like(rows)
    mask[3, 7] = 1
    model("rows-obj", [("output", [10, 8], rows, mask)], ["batch", 3, "height", "width"])

    # c. rows-noobj-chw [B, 4+3, 10]: the same boxes without objectness,
    # channels first; rows 4..9 are zero.
    noobj = np.array([
        [16, 12, 8, 10, 0.25, 0, 0],
        [40, 24, 16, 20, 0, 0.75, 0],
        [41, 25, 16, 20, 0, 0.5, 0],
        [56, 40, 8, 8, 0, 0, 0],
    ])
    noobj = np.vstack([noobj, np.zeros((6, 7))])
    nmask = np.zeros_like(noobj)
    nmask[3, 6] = 1
    model("rows-noobj-chw", [("output", [7, 10], noobj.T, nmask.T)], fixed)

    # d. boxes-scores: boxes [B, 4, 1, 4] x1,y1,x2,y2 as fractions of the input
    # (y multiples of 3 so that y/48 is exact), scores [B, 4, 3].
    boxes = np.array([
        [12, 6, 20, 18],
        [32, 15, 48, 36],
        [33, 15, 49, 36],
        [52, 36, 60, 45],
    ], np.float64) / np.array([64, 48, 64, 48])
    scores = np.array([
        [0.25, 0, 0],
        [0, 0.75, 0],
        [0, 0.5, 0],
        [0, 0, 0],
    ])
    smask = np.zeros_like(scores)
    smask[3, 2] = 1
    model("boxes-scores", [("boxes", [4, 1, 4], boxes, np.zeros_like(boxes)),
                           ("scores", [4, 3], scores, smask)], fixed)

    # e. e2e [B, 4, 6]: x1, y1, x2, y2 (input px), score, class; NMS already done.
    e2e = np.array([
        [12, 7, 20, 17, 0.25, 0],
        [32, 14, 48, 34, 0.75, 1],
        [52, 36, 60, 44, 0, 2],
        [0, 0, 0, 0, 0, 0],                      # padding row
    ])
    emask = np.zeros_like(e2e)
    emask[2, 4] = 1
    model("e2e", [("output", [4, 6], e2e, emask)], fixed,
          metadata={"names": "{0: 'person', 1: 'car', 2: 'dog'}"})

    # a. yolox-grid [B, 84, 5+3] at 64x64: 8*8 + 4*4 + 2*2 cells (strides 8, 16, 32).
    grid = np.zeros((84, 8))
    grid[3 * 8 + 2] = [0.5, 0.5, 0, 0, 1.0, 0.5, 0, 0]      # stride 8, cell (2,3): centre (20,28), 8x8, person 0.5
    grid[64 + 1 * 4 + 1] = [0, 0, 0, 0, 0.5, 0, 1.0, 0]     # stride 16, cell (1,1): centre (16,16), 16x16, car 0.5
    gmask = np.zeros_like(grid)
    gmask[80 + 1 * 2 + 1, 7] = 1                            # stride 32, cell (1,1): dog only on white frames
    grid[80 + 3] = [0, 0, 0, 0, 1.0, 0, 0, 0]
    model("yolox-grid", [("output", [84, 8], grid, gmask)], ["batch", 3, 64, 64])

    bad_models()


if __name__ == "__main__":
    main()
