export * from './contract';
export { Rng, type RngState } from './random';
export { ConfigError, parseConfig, joinPath } from './config';
