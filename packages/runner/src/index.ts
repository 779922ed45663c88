export { main, buildProgram, COMMANDS, EXIT_OK, EXIT_RUNTIME, EXIT_CONFIG, type Io } from './cli';
export { loadRunConfig, parseRunConfig, SECTIONS, type RunConfig, type EvaluationConfig, type BaselinesConfig } from './config';
export { runBaselines, episodeSeeds, type BaselinesResult } from './commands/baselines';
export { formatTable, pm } from './table';
