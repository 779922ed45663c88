export { createSimdBackend, type SimdBackend, type SimdBackendOptions } from './backend';
export type { SimdMode } from './loader';
