export * from './contract';
export { Rng, type RngState } from './random';
