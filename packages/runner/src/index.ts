export { main, buildProgram, COMMANDS, EXIT_OK, EXIT_RUNTIME, EXIT_CONFIG, EXIT_SIGINT, EXIT_SIGTERM, type Io } from './cli';
export {
  loadRunConfig,
  parseRunConfig,
  resolvedConfig,
  mergeDeep,
  SECTIONS,
  type RunConfig,
  type EvaluationConfig,
  type BaselinesConfig,
  type TrainConfig,
} from './config';
export { runBaselines, type BaselinesResult } from './commands/baselines';
export { episodeSeeds } from './seeds';
export { train, resumeRun, readSummary, heldOutSeeds, runDirName, RUN_FILES, type TrainOptions, type ResumeOptions, type TrainSummary, type ValidationPoint } from './trainer';
export { evaluateSource, transferSource, openPolicySource, type PolicySource } from './commands/evaluate';
export { compareControllers, evaluatePolicyOnDomains, checkTransfer, domainSummary, SERIES_KIND, EVALUATION_FORMAT, type DomainResult, type DomainSpec } from './evaluation';
export { loadPolicy, savePolicy, encodePolicy, decodePolicy, POLICY_KIND, type PolicyFile, type PolicyEnvInfo } from './policy';
export { PolicyNet } from './policy-net';
export { listCheckpoints, readCheckpoint, loadLatestCheckpoint, CHECKPOINT_KIND } from './checkpoint';
export { createProgress, noProgress, type Progress } from './progress';
export { formatTable, pm } from './table';
