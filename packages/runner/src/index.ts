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
export { exportPolicy, EXPORT_FORMATS, buildExportModel, configHash, loadPolicyJson, parsePolicyJson, PolicyEvaluator, type ExportFormat, type ExportInput, type ExportMetadata, type PolicyJson } from './export';
export { openExportSource } from './export/source';
export { PolicyServer, type BatchPolicy, type PolicyServerOptions } from './serve/server';
export { PolicyClient } from './serve/client';
export { ExternalEnv, externalEnvKind, parseExternalConfig, registerExternalEnv, type ExternalConfig } from './external/env';
export { runSolver, type SolverOptions } from './external/solver';
export { parseAddress, formatAddress, type Address } from './wire/address';
export { MSG, ERR, PROTOCOL_VERSION, RemoteError } from './wire/protocol';
export { loadSweep, parseSweep, settingKey, RANK_METRICS, type Sweep, type Setting, type RunTask, type RankMetric } from './sweep/spec';
export { executeRun, RUN_RECORD_FORMAT, type RunRecord, type RunOutcome } from './sweep/run';
export { aggregate, writeAggregate, aggregateLines, AGGREGATE_FORMAT, AGGREGATE_FILES, type Aggregate, type SettingRow, type RunRow, type Stat } from './sweep/aggregate';
export { runLocalPool, type PoolOptions, type PoolResult } from './sweep/pool';
