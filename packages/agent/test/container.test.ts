import { Rng } from '@tilewise/envs';
import { crc32 as zlibCrc32 } from 'node:zlib';
import { describe, expect, it } from 'vitest';
import { crc32, decodeContainer, encodeContainer, getBlock } from '../src/container';

describe('CRC-32', () => {
  it('gives the published check value and agrees with zlib', () => {
    // Check value of CRC-32/ISO-HDLC (the zlib/PNG/Ethernet CRC) over ASCII "123456789":
    // 0xCBF43926 (Williams 1993, "A painless guide to CRC error detection algorithms").
    expect(crc32(new TextEncoder().encode('123456789'))).toBe(0xcbf43926);
    expect(crc32(new Uint8Array(0))).toBe(0);
    const bytes = new Uint8Array(10_000);
    const rng = new Rng('crc');
    for (let i = 0; i < bytes.length; i++) bytes[i] = rng.int(256);
    expect(crc32(bytes)).toBe(zlibCrc32(bytes));
    // Incremental use equals one pass.
    expect(crc32(bytes.subarray(3000), crc32(bytes.subarray(0, 3000)))).toBe(crc32(bytes));
  });
});

describe('state container', () => {
  const blocks = () => ({
    weights: new Float32Array([1.5, -0, Number.MIN_VALUE, 3.4e38, NaN]),
    stats: new Float64Array([Math.PI, -1e-300, 2 ** 53]),
    counts: new Int32Array([-7, 0, 2 ** 31 - 1]),
    flags: new Uint8Array([0, 1, 255]),
    ids: new Uint32Array([0xffffffff]),
    empty: new Float32Array(0),
  });

  it('round-trips every block bit for bit, with its metadata', () => {
    const bytes = encodeContainer('test-kind', { a: 1, nested: { s: 'x' } }, blocks());
    const c = decodeContainer(bytes, 'test-kind');
    expect(c.meta).toEqual({ a: 1, nested: { s: 'x' } });
    for (const [name, arr] of Object.entries(blocks())) {
      const got = c.blocks.get(name)!;
      expect(got.constructor).toBe(arr.constructor);
      expect(new Uint8Array(got.buffer, got.byteOffset, got.byteLength)).toEqual(new Uint8Array(arr.buffer));
    }
    expect(Object.is(getBlock(c, 'weights', 'f32')[1], -0)).toBe(true);
  });

  it('rejects truncated, corrupted, foreign and mismatched files with clear errors', () => {
    const bytes = encodeContainer('test-kind', null, blocks());
    expect(() => decodeContainer(bytes.subarray(0, bytes.length - 1))).toThrow(/state file: truncated: \d+ bytes, the header describes \d+/);
    expect(() => decodeContainer(bytes.subarray(0, 10))).toThrow(/truncated/);
    expect(() => decodeContainer(bytes.subarray(0, 40))).toThrow(/truncated/);
    const bad = bytes.slice();
    bad[bad.length - 20]! ^= 1;
    expect(() => decodeContainer(bad)).toThrow(/checksum mismatch .* the file is corrupted/);
    const foreign = new TextEncoder().encode('{"kind":"json","not":"a container"}');
    expect(() => decodeContainer(foreign)).toThrow(/not a tilewise state container/);
    expect(() => decodeContainer(bytes, 'other-kind', 'checkpoint')).toThrow(/checkpoint: holds a "test-kind", expected a "other-kind"/);
    const c = decodeContainer(bytes);
    expect(() => getBlock(c, 'missing', 'f32')).toThrow(/block "missing" is missing/);
    expect(() => getBlock(c, 'stats', 'f32')).toThrow(/block "stats" holds f64, expected f32/);
    expect(() => getBlock(c, 'stats', 'f64', 4)).toThrow(/block "stats" has 3 elements, expected 4/);
    const longer = new Uint8Array(bytes.length + 3);
    longer.set(bytes);
    expect(() => decodeContainer(longer)).toThrow(/3 unexpected trailing bytes/);
  });

  it('decodes from a Node Buffer that is a view into a larger buffer (as readFileSync can return)', () => {
    const bytes = encodeContainer('test-kind', { a: 1 }, blocks());
    const big = Buffer.alloc(bytes.length + 24, 0x5a);
    big.set(bytes, 16);
    const view = big.subarray(16, 16 + bytes.length); // byteOffset 16 in a larger ArrayBuffer
    const c = decodeContainer(view);
    expect(Array.from(getBlock(c, 'stats', 'f64'))).toEqual([Math.PI, -1e-300, 2 ** 53]);
    expect(Array.from(getBlock(c, 'counts', 'i32'))).toEqual([-7, 0, 2 ** 31 - 1]);
    expect(getBlock(c, 'weights', 'f32').buffer.byteLength).toBe(5 * 4);
  });

  it('rejects duplicate or empty block names', () => {
    expect(() => encodeContainer('k', null, new Map([['', new Float32Array(1)]]))).toThrow(/unique and non-empty/);
  });
});
