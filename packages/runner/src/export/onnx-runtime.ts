/**
 * onnxruntime-node, loaded on first use (its native library is large and only `tilewise act` on
 * an .onnx file, the tests and the export benchmark need it). Resolved from this package, so
 * scripts outside it can use it too.
 */
export type OnnxRuntime = typeof import('onnxruntime-node');

let runtime: Promise<OnnxRuntime> | null = null;

export function loadOnnxRuntime(): Promise<OnnxRuntime> {
  runtime ??= import('onnxruntime-node');
  return runtime;
}
