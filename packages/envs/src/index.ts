export * from './contract';
export { Rng, type RngState } from './random';
export { ConfigError, parseConfig, joinPath } from './config';
export { ComplexFft, RealFft } from './fft';
export { etdrk4Coefficients, Etdrk4Stepper, type Etdrk4Coefficients, type Etdrk4Options, type NonlinearTerm } from './etdrk4';
export { halfSpectrumWavenumbers, twoThirdsMask, differentiateSpectrum, SpectralDerivative } from './spectral';
export { KsEnv, KsSolver, ksConfigSchema, parseKsConfig, measureKsP0, ksEnvKind, type KsConfig } from './ks';
export { Fft2 } from './fft2';
export {
  KolmogorovEnv,
  KolmogorovSolver,
  kolmogorovConfigSchema,
  parseKolmogorovConfig,
  kolmogorovEnvKind,
  measureKolmogorovReferences,
  fluctuationStats,
  sensorSamples,
  laminarAmplitude,
  type KolmogorovConfig,
  type KolmogorovStepOut,
  type FluctuationStats,
  type FlowBudget,
} from './kolmogorov';
export { envKinds, envKind, registerEnvKind, parseEnvConfig, createEnv, type EnvKind, type EnvCreateOptions, type ParsedEnvConfig } from './registry';
export { cachedReference, defaultCacheDir, referenceFromBlocks, type ReferenceValue } from './reference';
export { checkSpec, checkObservation, checkStepOut, checkOppositionSignal, exerciseEnv } from './checker';
export {
  noControl,
  opposition,
  randomActuation,
  evaluatePolicy,
  summarizeEpisodes,
  sweepOppositionGain,
  gainGrid,
  formatGain,
  type BaselinePolicy,
  type EpisodeResult,
  type EvaluationOptions,
  type PolicySummary,
  type GainSweepOptions,
  type GainSweepResult,
} from './baselines';
export { meanWithCi, studentTQuantile, studentTCdf, type MeanCi } from './stats';
