/**
 * The ONNX export: a ModelProto encoded with the protobuf definitions of the `onnx-proto`
 * package (compiled from the official onnx.proto3 of ONNX 1.10.2), never by string templates.
 *
 * Graph (opset 13, IR version 8; every tensor float32):
 *   input  "obs"     [tiles, obsDim]   (tiles is the symbolic dimension "tiles")
 *   Sub(obs, mean) -> Mul(., invStd) -> Clip(., -clip, clip)             (omitted without a normaliser)
 *   per layer l:  Gemm(h, W_l [n_l, n_l+1], b_l [n_l+1]) -> Relu | Tanh   (linear: no node)
 *   Mul(., actionBound)
 *   output "actions" [tiles, actDim]
 * Operators as specified by the ONNX operator documents: Gemm-13 (Y = A B + C, C broadcast
 * over rows), Clip-13 (min and max as scalar inputs), Sub-13 and Mul-13 (numpy broadcasting),
 * Relu-13, Tanh-13.
 *
 * metadata_props (key -> value, all strings):
 *   "tilewise.metadata"      the whole ExportMetadata as JSON (model.ts)
 *   "tilewise.obs_layout"    metadata.env.obsLayout as JSON
 *   "tilewise.action_bound"  the bound (decimal)
 *   "tilewise.tile_grid"     "[Tx,Ty]"
 *   "tilewise.config_hash"   "sha256:<hex>"
 *   "tilewise.normalizer"    "baked" or "none" (the input is the raw observation either way)
 */
import onnxProto from 'onnx-proto';
import type { ExportModel } from './model';

const { onnx } = onnxProto;

export const ONNX_OPSET = 13;
/** IR version 8 (ONNX 1.10), the newest the bundled definitions describe; opset 13 needs >= 7. */
export const ONNX_IR_VERSION = 8;
const FLOAT = onnx.TensorProto.DataType.FLOAT;

function tensor(name: string, dims: number[], values: ArrayLike<number>): InstanceType<typeof onnx.TensorProto> {
  const f = Float32Array.from(values);
  // raw_data holds little-endian float32 (the ONNX TensorProto convention); copy to a fresh buffer.
  return onnx.TensorProto.create({ name, dims, dataType: FLOAT, rawData: new Uint8Array(f.buffer.slice(0)) });
}

function node(op: string, inputs: string[], output: string): InstanceType<typeof onnx.NodeProto> {
  return onnx.NodeProto.create({ opType: op, input: inputs, output: [output], name: output });
}

function valueInfo(name: string, dims: Array<string | number>): InstanceType<typeof onnx.ValueInfoProto> {
  return onnx.ValueInfoProto.create({
    name,
    type: {
      tensorType: {
        elemType: FLOAT,
        shape: { dim: dims.map((d) => (typeof d === 'string' ? { dimParam: d } : { dimValue: d })) },
      },
    },
  });
}

/** The ONNX model bytes of an export model. */
export function onnxBytes(m: ExportModel, producerVersion = '0.1.0'): Uint8Array {
  const inits: Array<InstanceType<typeof onnx.TensorProto>> = [];
  const nodes: Array<InstanceType<typeof onnx.NodeProto>> = [];
  let h = 'obs';
  const nz = m.normalizer;
  if (nz) {
    inits.push(tensor('norm_mean', [m.obsDim], nz.mean), tensor('norm_inv_std', [m.obsDim], nz.invStd));
    inits.push(tensor('norm_clip_min', [], [-nz.clip]), tensor('norm_clip_max', [], [nz.clip]));
    nodes.push(node('Sub', [h, 'norm_mean'], 'obs_centred'));
    nodes.push(node('Mul', ['obs_centred', 'norm_inv_std'], 'obs_scaled'));
    nodes.push(node('Clip', ['obs_scaled', 'norm_clip_min', 'norm_clip_max'], 'obs_normalised'));
    h = 'obs_normalised';
  }
  m.layers.forEach((l, i) => {
    inits.push(tensor(`W${i}`, [l.nIn, l.nOut], l.weights), tensor(`b${i}`, [l.nOut], l.bias));
    nodes.push(node('Gemm', [h, `W${i}`, `b${i}`], `dense${i}`));
    h = `dense${i}`;
    if (l.activation !== 'linear') {
      nodes.push(node(l.activation === 'relu' ? 'Relu' : 'Tanh', [h], `${l.activation}${i}`));
      h = `${l.activation}${i}`;
    }
  });
  inits.push(tensor('action_bound', [], [m.actionBound]));
  nodes.push(node('Mul', [h, 'action_bound'], 'actions'));
  const md = m.metadata;
  const props: Record<string, string> = {
    'tilewise.metadata': JSON.stringify(md),
    'tilewise.obs_layout': JSON.stringify(md.env.obsLayout),
    'tilewise.action_bound': String(m.actionBound),
    'tilewise.tile_grid': JSON.stringify(md.env.tileGrid),
    'tilewise.config_hash': md.configHash,
    'tilewise.normalizer': nz ? 'baked' : 'none',
  };
  const model = onnx.ModelProto.create({
    irVersion: ONNX_IR_VERSION,
    opsetImport: [{ domain: '', version: ONNX_OPSET }],
    producerName: 'tilewise',
    producerVersion,
    docString:
      'tilewise shared-weight policy for one tile: actions [tiles, actDim] from raw observations [tiles, obsDim]; ' +
      'observation normalisation and action scaling are part of the graph. Metadata: metadata_props "tilewise.*".',
    graph: {
      name: 'tilewise_policy',
      node: nodes,
      initializer: inits,
      input: [valueInfo('obs', ['tiles', m.obsDim])],
      output: [valueInfo('actions', ['tiles', m.actDim])],
    },
    metadataProps: Object.entries(props).map(([key, value]) => ({ key, value })),
  });
  return onnx.ModelProto.encode(model).finish();
}

/** Decode an ONNX file's metadata_props (for checks and `tilewise act`). */
export function onnxMetadataProps(bytes: Uint8Array): Record<string, string> {
  const model = onnx.ModelProto.decode(bytes);
  return Object.fromEntries(model.metadataProps.map((p) => [p.key, p.value]));
}
