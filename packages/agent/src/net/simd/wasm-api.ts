/**
 * The few WebAssembly JS-API members the simd backend uses, typed locally: the workspace
 * compiles without the DOM library, and @types/node does not declare the `WebAssembly` global.
 */
export interface WasmMemory {
  readonly buffer: ArrayBuffer | SharedArrayBuffer;
  grow(pages: number): number;
}

export type WasmModule = object;

export interface WasmApi {
  validate(bytes: Uint8Array): boolean;
  Module: new (bytes: Uint8Array) => WasmModule;
  Memory: new (desc: { initial: number; maximum: number; shared: boolean }) => WasmMemory;
  Instance: new (module: WasmModule, imports: Record<string, Record<string, unknown>>) => { exports: Record<string, unknown> };
}

/** The engine's WebAssembly namespace. */
export function wasmApi(): WasmApi {
  return (globalThis as unknown as { WebAssembly: WasmApi }).WebAssembly;
}
