/**
 * The JSON export loader against crafted bad files: every size is validated before anything is
 * allocated, the file size before it is read, and each error names the field and the value.
 */
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { buildExportModel, DEFAULT_POLICY_JSON_LIMITS, loadPolicyJson, parsePolicyJson, policyJsonText } from '../src/export';
import { trainedPolicy } from './helpers/policy';

let good: Record<string, any>;
let goodText: string;
const dir = mkdtempSync(join(tmpdir(), 'tilewise-json-'));

beforeAll(async () => {
  const t = await trainedPolicy({ hidden: [8], seed: 21, updates: 2 });
  goodText = policyJsonText(buildExportModel(t.input));
  good = JSON.parse(goodText);
  t.agent.dispose();
});

/** A deep copy of the good file with `edit` applied. */
function crafted(edit: (f: Record<string, any>) => void): string {
  const f = JSON.parse(JSON.stringify(good));
  edit(f);
  return JSON.stringify(f);
}

describe('policy JSON loader', () => {
  it('accepts the file tilewise writes', () => {
    const p = parsePolicyJson(goodText);
    expect(p.snapshot.spec.sizes).toEqual([24, 8, 1]);
    expect(p.metadata.format).toBe('tilewise-export-metadata/1');
  });

  const bad: Array<[string, (f: Record<string, any>) => void, RegExp]> = [
    ['another format', (f) => (f.format = 'onnx'), /format: expected "tilewise-policy-json", got "onnx"/],
    ['a newer version', (f) => (f.version = 2), /version: 2 is not supported \(this build reads version 1; the file is newer/],
    ['a version that is not an integer', (f) => (f.version = '1'), /version: expected an integer, got "1"/],
    ['no actor', (f) => delete f.actor, /actor: expected an object, got nothing/],
    ['a width of zero', (f) => (f.actor.sizes = [24, 0, 1]), /actor.sizes\[1\]: expected an integer in \[1, 8192\], got 0/],
    ['a fractional width', (f) => (f.actor.sizes = [24, 8.5, 1]), /actor.sizes\[1\]: expected an integer in \[1, 8192\], got 8.5/],
    ['a width as text', (f) => (f.actor.sizes = [24, '8', 1]), /actor.sizes\[1\]: expected an integer .* got "8"/],
    ['a gigantic width', (f) => (f.actor.sizes = [24, 1e9, 1]), /actor.sizes\[1\]: expected an integer in \[1, 8192\], got 1000000000/],
    [
      'widths whose product would take gigabytes',
      (f) => (f.actor.sizes = [8192, 8192, 8192, 1]),
      /actor.sizes: \[8192,8192,8192,1\] needs more than the limit of 8388608 parameters/,
    ],
    ['too many layers', (f) => (f.actor.sizes = new Array(40).fill(2)), /actor.sizes: expected 2 to 17 widths \(at most 16 layers\), got 40/],
    ['one width only', (f) => (f.actor.sizes = [24]), /actor.sizes: expected 2 to 17 widths/],
    ['a missing layer', (f) => f.actor.layers.pop(), /actor.layers: expected 2 values, got 1/],
    ['a short weight array', (f) => f.actor.layers[0].weights.pop(), /actor.layers\[0\].weights: expected 192 values, got 191/],
    ['a long bias', (f) => f.actor.layers[1].bias.push(0), /actor.layers\[1\].bias: expected 1 values, got 2/],
    ['a weight as text', (f) => (f.actor.layers[0].weights[5] = 'NaN'), /actor.layers\[0\].weights\[5\]: expected a finite number, got "NaN"/],
    ['a null weight (NaN written by a careless tool)', (f) => (f.actor.layers[1].weights[3] = null), /actor.layers\[1\].weights\[3\]: expected a finite number, got null/],
    ['an unknown activation', (f) => (f.actor.hidden = 'gelu'), /actor.hidden: expected one of relu, tanh, linear, got "gelu"/],
    ['a negative bound', (f) => (f.actionBound = -1), /actionBound: expected a positive finite number, got -1/],
    ['a short normaliser mean', (f) => f.normalizer.mean.pop(), /normalizer.mean: expected 24 values, got 23/],
    ['a zero invStd', (f) => (f.normalizer.invStd[2] = 0), /normalizer.invStd\[2\]: expected a positive number, got 0/],
    ['a clip of zero', (f) => (f.normalizer.clip = 0), /normalizer.clip: expected a positive finite number, got 0/],
    ['metadata with another obsDim', (f) => (f.metadata.obsDim = 12), /metadata.obsDim: 12 differs from the weights' 24/],
    ['metadata with another bound', (f) => (f.metadata.actionBound = 2), /metadata.actionBound: 2 differs from the weights' 0.5/],
    ['a layout that does not sum to obsDim', (f) => (f.metadata.env.obsLayout[0].count = 20), /metadata.env.obsLayout\[0\].positions: expected 20 values, got 24/],
    ['a tile count that is not the grid product', (f) => (f.metadata.env.tiles = 5), /metadata.env.tiles: expected an integer in \[4, 4\], got 5/],
    ['no metadata', (f) => delete f.metadata, /metadata: expected an object, got nothing/],
  ];
  for (const [what, edit, message] of bad) {
    it(`rejects ${what}, naming the field`, () => {
      expect(() => parsePolicyJson(crafted(edit), 'crafted.json')).toThrow(message);
    });
  }

  it('rejects text that is not JSON, or truncated', () => {
    expect(() => parsePolicyJson(goodText.slice(0, goodText.length / 2), 'cut.json')).toThrow(/cut.json: \(file\): not valid JSON/);
    expect(() => parsePolicyJson('[1, 2]', 'array.json')).toThrow(/array.json: \(top level\): expected an object, got \[1,2\]/);
  });

  it('refuses a file over the byte limit before reading it', () => {
    const path = join(dir, 'big.json');
    writeFileSync(path, goodText);
    const limits = { ...DEFAULT_POLICY_JSON_LIMITS, maxBytes: 1000 };
    expect(() => loadPolicyJson(path, limits)).toThrow(new RegExp(`big.json: \\(file\\): ${Buffer.byteLength(goodText)} bytes is more than the limit of 1000`));
    expect(loadPolicyJson(path).snapshot.spec.sizes).toEqual([24, 8, 1]);
    expect(() => loadPolicyJson(join(dir, 'missing.json'))).toThrow(/missing.json: cannot read it \(ENOENT\)/);
  });

  it('a crafted file declaring a huge network allocates nothing of that size', () => {
    // 8192 x 8192 x 3 layers would be 805 MB of float32 if the sizes were trusted.
    const text = crafted((f) => {
      f.actor.sizes = [8192, 8192, 8192, 8192];
      f.actor.layers = [{ weights: [1], bias: [1] }];
    });
    const before = process.memoryUsage().arrayBuffers;
    expect(() => parsePolicyJson(text, 'huge.json', { ...DEFAULT_POLICY_JSON_LIMITS, maxParams: 2 ** 30 })).toThrow(/actor.layers: expected 3 values, got 1/);
    expect(() => parsePolicyJson(crafted((f) => (f.actor.sizes = [8192, 8192, 8192, 1])), 'huge.json')).toThrow(/needs more than the limit/);
    expect(process.memoryUsage().arrayBuffers - before).toBeLessThan(64 * 2 ** 20);
  });
});
