// Package onnx detects objects with YOLO-family models exported to ONNX, on
// the CPU: anchor-based heads with objectness, anchor-free grid heads and
// end-to-end heads with NMS in the graph (see Layout). Two engines run the
// same model: ONNX Runtime 1.24.1 through onnxruntime_go (the fast one) and
// OpenCV's DNN module (the independent reference and the fallback).
//
// A Detector letterboxes each frame into the model's input (Prepare, on the
// capture goroutine, so that it overlaps inference of the previous frame),
// runs the engine on a batch of frames, decodes the output layout, maps the
// boxes back to source pixels and suppresses duplicates. The model file is
// read by a small protobuf reader of its own (ParseModel) so that both
// engines choose the same layout and a broken file gets the same error.
package onnx
