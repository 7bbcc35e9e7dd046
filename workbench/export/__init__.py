"""Results out: the export bundle, model files, ONNX, prediction and the HTML report."""
