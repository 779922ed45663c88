/**
 * Training: `train()` starts a run in a new run directory, `resumeRun()` continues one from its
 * newest good checkpoint. Both return the run's summary (also written as summary.json), so a
 * sweep can call them as functions.
 *
 * One environment step (all B copies, T tiles each) of the loop:
 *   1. a = agent.act(obs, explore)                 exploration (uniform during warm-up)
 *   2. start the environment step with a            in the train worker (train.parallel)
 *   3. run the agent's updates for this step        meanwhile, on this thread
 *   4. await the step; store the B*T transitions    time limits bootstrap; divergence is terminal
 * The updates of step t sample transitions up to step t-1 in both modes, so a run is the same
 * with and without the worker.
 *
 * Validation (every `validation.every` steps): a snapshot of the deterministic policy is scored
 * on held-out seeds in the validation worker while training goes on. Its result is collected
 * at the next validation point (or checkpoint, or the end), where the best policy, the log and
 * the stop criteria `dragBelow` and `patience` are updated: at fixed steps, so a run's course
 * does not depend on how fast the validation finished.
 *
 * Determinism: every random draw comes from generators derived from train.seed (agent.ts,
 * env-runner.ts); checkpoints hold all of them. A run stopped by steps and resumed continues
 * bit for bit (tested). A time budget (stop.seconds) ends a run at a machine-dependent step.
 */
import { existsSync, mkdirSync, readFileSync } from 'node:fs';
import { basename, join, resolve as resolvePath } from 'node:path';
import { createAgent, type Agent, type Json, type PolicySnapshot } from '@tilewise/agent';
import { ConfigError, type EnvEvent, type PolicySummary, type TiledEnv } from '@tilewise/envs';
import { stringify as toYaml } from 'yaml';
import { writeFileAtomic, type AtomicWriteHooks } from './atomic';
import { blocksUnder, loadLatestCheckpoint, writeCheckpoint, CHECKPOINT_FORMAT, type CheckpointData } from './checkpoint';
import { episodeSeeds } from './seeds';
import { parseRunConfig, readYamlFile, resolvedConfig, type RunConfig } from './config';
import { buildEnv } from './env-build';
import type { EnvRunnerState } from './env-runner';
import { createRunLogger, metric, type RunLogger } from './log';
import { policyEnvSpec, savePolicy, type PolicyFile } from './policy';
import { noProgress, type Progress } from './progress';
import { createTrainSide, createValidator, type TrainSide, type Validator } from './worker';

/** Longest wall-clock stretch, in milliseconds, the training loop runs without yielding to the event loop. */
const YIELD_MS = 100;

/** File names inside a run directory (docs/runner.md). */
export const RUN_FILES = {
  config: 'config.yaml',
  log: 'log.jsonl',
  summary: 'summary.json',
  checkpoints: 'checkpoints',
  latest: 'latest.policy',
  best: 'best.policy',
  evaluation: 'evaluation',
} as const;

export interface ValidationPoint {
  readonly step: number;
  readonly drag: number | null;
  readonly halfWidth: number | null;
  readonly netSaving: number | null;
  readonly atBounds: number | null;
  readonly divergedEpisodes: number;
  /** Training seconds when the snapshot was taken. */
  readonly seconds: number;
}

export interface TrainSummary {
  readonly format: 'tilewise-run-summary/1';
  readonly status: 'running' | 'completed' | 'interrupted' | 'failed';
  readonly stopReason: string | null;
  readonly error?: string;
  readonly name: string;
  readonly runDir: string;
  readonly seed: number;
  readonly kind: string;
  readonly dragName: string;
  readonly reference: number;
  readonly backend: string;
  readonly parallel: boolean;
  readonly steps: number;
  readonly updates: number;
  readonly transitions: number;
  readonly episodes: number;
  readonly trainSeconds: number;
  readonly stepsPerSecond: number | null;
  readonly best: ValidationPoint | null;
  readonly validations: readonly ValidationPoint[];
  readonly resumes: ReadonlyArray<{ readonly step: number; readonly checkpoint: string; readonly at: string }>;
  readonly startedAt: string;
  readonly updatedAt: string;
  readonly files: Readonly<Record<string, string>>;
  /** Filled in by the final evaluation (evaluate.ts). */
  readonly evaluation?: Json;
}

export interface TrainOptions {
  /** Directory under which the run directory is created (default "runs"). */
  readonly runsDir?: string;
  /** Use exactly this run directory (must not exist or be empty); overrides runsDir. */
  readonly runDir?: string;
  /** Used for the default run name (its base name). */
  readonly configPath?: string;
  readonly cacheDir?: string;
  readonly progress?: Progress;
  /** Human-readable lines (stderr in the CLI). */
  readonly say?: (line: string) => void;
  /** Aborting it stops training after the current step with a final checkpoint. */
  readonly signal?: AbortSignal;
  /** Tests: hooks of the checkpoint writes. */
  readonly checkpointHooks?: AtomicWriteHooks;
  /** Clock in seconds (tests may pin it). */
  readonly now?: () => number;
}

export interface ResumeOptions extends Omit<TrainOptions, 'runsDir' | 'runDir' | 'configPath'> {
  /** Replace stop.steps / stop.seconds for the rest of the run. */
  readonly steps?: number | null;
  readonly seconds?: number | null;
}

/** A run directory name: <name>-seed<seed>-<UTC yyyymmdd-hhmmss>. */
export function runDirName(name: string, seed: number, date: Date): string {
  const p = (n: number, w = 2) => String(n).padStart(w, '0');
  const stamp = `${date.getUTCFullYear()}${p(date.getUTCMonth() + 1)}${p(date.getUTCDate())}-${p(date.getUTCHours())}${p(date.getUTCMinutes())}${p(date.getUTCSeconds())}`;
  return `${name}-seed${seed}-${stamp}`;
}

function newRunDir(o: TrainOptions, cfg: RunConfig): { dir: string; name: string } {
  const name = cfg.train.name ?? (o.configPath ? basename(o.configPath).replace(/\.(ya?ml)$/i, '') : 'run');
  if (o.runDir) {
    const dir = resolvePath(o.runDir);
    if (existsSync(join(dir, RUN_FILES.summary))) throw new ConfigError([`--run-dir: ${dir} already holds a run (use resume)`]);
    mkdirSync(dir, { recursive: true });
    return { dir, name };
  }
  const base = join(resolvePath(o.runsDir ?? 'runs'), runDirName(name, cfg.train.seed, new Date()));
  let dir = base;
  for (let k = 2; existsSync(dir); k++) dir = `${base}-${k}`;
  mkdirSync(dir, { recursive: true });
  return { dir, name };
}

/** Held-out seeds: validation, baseline tuning and evaluation (never used to start a training episode). */
export function heldOutSeeds(cfg: RunConfig): { validation: number[]; tuning: number[]; evaluation: number[] } {
  const ev = cfg.evaluation;
  return {
    validation: episodeSeeds(ev.seed, 'validation', cfg.train.validation.episodes),
    tuning: episodeSeeds(ev.seed, 'baseline-tuning', cfg.baselines.gainSweep.episodes),
    evaluation: episodeSeeds(ev.seed, 'evaluation', ev.episodes),
  };
}

/** Checkpoints need the env's getState/setState: reject the combination before any work. */
function checkCheckpointable(cfg: RunConfig): void {
  const probe: TiledEnv = buildEnv({ config: cfg.env.config as Record<string, unknown>, copies: 1, reference: 1 });
  if (cfg.train.checkpoint.enabled && !(probe.getState && probe.setState)) {
    throw new ConfigError([
      `train.checkpoint.enabled: env kind "${cfg.env.config.kind}" cannot save its state (no getState/setState), so runs on it cannot be checkpointed or resumed (got true; set it to false)`,
    ]);
  }
}

/** Start a new run. */
export async function train(cfg: RunConfig, o: TrainOptions = {}): Promise<TrainSummary> {
  checkCheckpointable(cfg);
  const { dir, name } = newRunDir(o, cfg);
  writeFileAtomic(join(dir, RUN_FILES.config), `# tilewise run config, every default filled in\n${toYaml(resolvedConfig(cfg))}`);
  const ref = cfg.env.kind.reference(cfg.env.config, { cacheDir: o.cacheDir });
  return runLoop(cfg, dir, name, ref.mean, null, o);
}

/** Continue a run from its newest good checkpoint. */
export async function resumeRun(runDir: string, o: ResumeOptions = {}): Promise<TrainSummary> {
  const dir = resolvePath(runDir);
  if (!existsSync(join(dir, RUN_FILES.config))) throw new ConfigError([`${dir}: not a run directory (no ${RUN_FILES.config})`]);
  let cfg = parseRunConfig(readYamlFile(join(dir, RUN_FILES.config), 'run config'));
  if (o.steps !== undefined || o.seconds !== undefined) {
    const stop = { ...cfg.train.stop, ...(o.steps !== undefined ? { steps: o.steps } : {}), ...(o.seconds !== undefined ? { seconds: o.seconds } : {}) };
    cfg = { ...cfg, train: { ...cfg.train, stop } };
  }
  const say = o.say ?? (() => {});
  const found = loadLatestCheckpoint(join(dir, RUN_FILES.checkpoints), (m) => say(`tilewise: ${m}`));
  if (!found) throw new Error(`${dir}: no readable checkpoint to resume from`);
  const summary = readSummary(dir);
  const name = summary?.name ?? basename(dir);
  return runLoop(cfg, dir, name, found.data.meta.reference as number, { ...found, summary }, o);
}

export function readSummary(dir: string): TrainSummary | null {
  try {
    return JSON.parse(readFileSync(join(dir, RUN_FILES.summary), 'utf8')) as TrainSummary;
  } catch {
    return null;
  }
}

/** What the trainer itself carries between steps (saved in checkpoints as meta.trainer). */
interface TrainerState {
  step: number;
  updateCarry: number;
  seconds: number;
  episodes: number;
  validations: ValidationPoint[];
  best: ValidationPoint | null;
  /** Best drag among periodic validations only, and how many periodic ones came after it (stop.patience). */
  periodicBest: number | null;
  sinceBest: number;
  stopReason: string | null;
}

/** Sums over the current log interval. */
class Window {
  steps = 0;
  reward = 0;
  rewardCount = 0;
  drag = 0;
  dragCount = 0;
  critic = 0;
  criticCount = 0;
  actor = 0;
  actorCount = 0;
  q = 0;
  episodeReturn = 0;
  episodeDrag = 0;
  episodeDragCount = 0;
  episodes = 0;
  diverged = 0;
  clear(): void {
    Object.assign(this, new Window());
  }
}

async function runLoop(
  cfg: RunConfig,
  dir: string,
  name: string,
  reference: number,
  restore: { path: string; data: CheckpointData; summary: TrainSummary | null } | null,
  o: TrainOptions,
): Promise<TrainSummary> {
  const now = o.now ?? (() => performance.now() / 1000);
  const say = o.say ?? (() => {});
  const progress = o.progress ?? noProgress;
  const t = cfg.train;
  const log = createRunLogger(join(dir, RUN_FILES.log), name);
  const seeds = heldOutSeeds(cfg);
  const envSpecData = { config: cfg.env.config as Record<string, unknown>, reference };
  const onEvent = (e: EnvEvent): void => {
    log.warn({ step: state.step, event: e }, 'event');
    if (e.kind === 'diverged') progress.line(`[${e.kind}] ${e.message}`);
  };
  // The spec without stepping anything (one copy, never reset).
  const spec = buildEnv({ ...envSpecData, copies: 1 }).spec;
  const agent = await createAgent({
    obsDim: spec.obsDim,
    actDim: spec.actDim,
    actionBound: spec.actionBound,
    seed: t.seed,
    config: cfg.agent,
    log: (m) => say(m),
  });
  const heldOut = [...seeds.validation, ...seeds.tuning, ...seeds.evaluation];
  let side: TrainSide | null = null;
  let validator: Validator | null = null;
  const startedAt = restore?.summary?.startedAt ?? new Date().toISOString();
  const resumes = [...(restore?.summary?.resumes ?? [])];
  const state: TrainerState = {
    step: 0,
    updateCarry: 0,
    seconds: 0,
    episodes: 0,
    validations: [],
    best: null,
    periodicBest: null,
    sinceBest: 0,
    stopReason: null,
  };
  let bestSnapshot: PolicySnapshot | null = null;
  let sessionStart = now();
  const elapsed = (): number => state.seconds + (now() - sessionStart);
  const count = t.copies * spec.tiles;

  /** Counters of the moment a policy snapshot is taken. */
  const counters = () => ({ step: state.step, updates: agent.updates, transitions: agent.transitions });
  const policyFile = (snap: PolicySnapshot, label: string, v: ValidationPoint | null, at = counters()): PolicyFile => ({
    snapshot: snap,
    env: { kind: spec.kind, config: cfg.env.config as Record<string, unknown>, spec: policyEnvSpec(spec), reference },
    source: {
      run: name,
      runDir: dir,
      label,
      step: at.step,
      updates: at.updates,
      transitions: at.transitions,
      seed: t.seed,
      validation: v ? (JSON.parse(JSON.stringify(v)) as Json) : null,
      savedAt: new Date().toISOString(),
    },
  });

  const summary = (status: TrainSummary['status'], error?: string): TrainSummary => ({
    format: 'tilewise-run-summary/1',
    status,
    stopReason: state.stopReason,
    ...(error ? { error } : {}),
    name,
    runDir: dir,
    seed: t.seed,
    kind: spec.kind,
    dragName: spec.dragName,
    reference,
    backend: agent.backend.name,
    parallel: t.parallel,
    steps: state.step,
    updates: agent.updates,
    transitions: agent.transitions,
    episodes: state.episodes,
    trainSeconds: metric(elapsed()) ?? 0,
    stepsPerSecond: metric(state.step / Math.max(1e-9, elapsed())),
    best: state.best,
    validations: state.validations,
    resumes,
    startedAt,
    updatedAt: new Date().toISOString(),
    files: {
      config: RUN_FILES.config,
      log: RUN_FILES.log,
      checkpoints: RUN_FILES.checkpoints,
      latest: RUN_FILES.latest,
      best: RUN_FILES.best,
    },
  });
  const writeSummary = (s: TrainSummary): void => writeFileAtomic(join(dir, RUN_FILES.summary), `${JSON.stringify(s, null, 2)}\n`);

  try {
    // Both helpers start at once (a worker takes a second or more to load its modules).
    const started = await Promise.allSettled([
      createTrainSide({ parallel: t.parallel, env: { ...envSpecData, copies: t.copies }, onEvent, runSeed: t.seed, heldOut }),
      t.validation.every > 0 ? createValidator({ parallel: t.parallel, env: { ...envSpecData, copies: t.validation.episodes }, onEvent }) : null,
    ]);
    side = started[0].status === 'fulfilled' ? started[0].value : null;
    validator = started[1].status === 'fulfilled' ? started[1].value : null;
    for (const r of started) if (r.status === 'rejected') throw r.reason; // `finally` closes the other
    const env = side!;
    const valLen = t.validation.episodeLength ?? cfg.evaluation.episodeLength;
    const valDiscard = t.validation.discardDecisions ?? cfg.evaluation.discardDecisions;

    let obs: Float32Array;
    if (restore) {
      const m = restore.data.meta;
      const tr = m.trainer as unknown as TrainerState;
      Object.assign(state, tr, { stopReason: null });
      agent.setState({ meta: m.agent as Json, blocks: blocksUnder(restore.data.blocks, 'agent/') }, `checkpoint ${restore.path}`);
      if (m.backend !== agent.backend.name) {
        say(`tilewise: warning: the checkpoint was written with backend ${String(m.backend)}, this run uses ${agent.backend.name}; the continuation is not bit-identical`);
      }
      await env.setState(envRunnerStateFrom(restore.data));
      obs = await env.observe();
      bestSnapshot = bestFrom(restore.data, agent);
      resumes.push({ step: state.step, checkpoint: basename(restore.path), at: new Date().toISOString() });
      log.info({ step: state.step, checkpoint: restore.path }, 'resume');
      say(`resuming ${dir} at step ${state.step} from ${basename(restore.path)}`);
    } else {
      obs = await env.start();
      log.info(
        {
          step: 0,
          kind: spec.kind,
          obsDim: spec.obsDim,
          actDim: spec.actDim,
          tiles: spec.tiles,
          copies: t.copies,
          backend: agent.backend.name,
          parallel: t.parallel,
          reference,
          validationSeeds: seeds.validation,
        },
        'start',
      );
      say(`run directory: ${dir}`);
    }
    writeSummary(summary('running'));
    sessionStart = now();

    // --- validation, collected at fixed steps -----------------------------------------------
    // The end-of-run validation (at a step that is not a multiple of validation.every) may set the
    // best policy but does not count for stop.patience, so a run stopped and resumed stops
    // where the same run made in one go would.
    let pending: {
      step: number;
      at: ReturnType<typeof counters>;
      seconds: number;
      periodic: boolean;
      snapshot: PolicySnapshot;
      result: Promise<PolicySummary>;
    } | null = null;
    const collect = async (): Promise<void> => {
      if (!pending) return;
      const p = pending;
      pending = null;
      const r = await p.result;
      const v: ValidationPoint = {
        step: p.step,
        drag: metric(r.drag?.mean),
        halfWidth: metric(r.drag?.halfWidth),
        netSaving: metric(r.netSaving?.mean),
        atBounds: metric(r.atBounds?.mean),
        divergedEpisodes: r.divergedEpisodes,
        seconds: metric(p.seconds) ?? 0,
      };
      state.validations.push(v);
      const better = v.drag !== null && v.divergedEpisodes === 0 && (state.best === null || v.drag < state.best.drag!);
      if (better) {
        state.best = v;
        bestSnapshot = p.snapshot;
        savePolicy(join(dir, RUN_FILES.best), policyFile(p.snapshot, 'best', v, p.at));
      }
      if (p.periodic && v.drag !== null && v.divergedEpisodes === 0 && (state.periodicBest === null || v.drag < state.periodicBest)) {
        state.periodicBest = v.drag;
        state.sinceBest = 0;
      } else if (p.periodic) state.sinceBest++;
      log.info(
        {
          step: v.step,
          'eval/drag_ratio': v.drag,
          'eval/drag_ratio_ci95': v.halfWidth,
          'eval/drag_reduction': v.drag === null ? null : metric(1 - v.drag),
          'eval/net_saving': v.netSaving,
          'eval/at_bounds': v.atBounds,
          'eval/diverged_episodes': v.divergedEpisodes,
          'eval/best_drag_ratio': state.best?.drag ?? null,
          'eval/best_step': state.best?.step ?? null,
          'time/train_seconds': v.seconds,
        },
        'validation',
      );
      if (better) log.info({ step: v.step, 'eval/best_drag_ratio': v.drag }, 'best');
      if (t.stop.dragBelow !== null && v.drag !== null && v.drag < t.stop.dragBelow) state.stopReason ??= `validation ${spec.dragName} ${v.drag} < stop.dragBelow ${t.stop.dragBelow}`;
      if (t.stop.patience !== null && state.sinceBest >= t.stop.patience) state.stopReason ??= `${state.sinceBest} validations without a new best (stop.patience)`;
    };
    const launchValidation = (periodic: boolean): void => {
      if (!validator) return;
      const snapshot = agent.policy();
      pending = {
        step: state.step,
        at: counters(),
        periodic,
        seconds: elapsed(),
        snapshot,
        result: validator.validate({ snapshot, seeds: seeds.validation, episodeLength: valLen, discardDecisions: valDiscard }),
      };
    };

    // --- checkpoints ---------------------------------------------------------------------------
    let lastCheckpointTime = now();
    let lastCheckpointStep = state.step;
    let validationsAtCheckpoint = state.validations.length;
    const checkpoint = async (): Promise<void> => {
      if (!t.checkpoint.enabled) return;
      await collect();
      const envState = await env.getState();
      const data = checkpointData(state, agent, envState, bestSnapshot, reference, elapsed());
      const path = writeCheckpoint(join(dir, RUN_FILES.checkpoints), data, t.checkpoint.keep, o.checkpointHooks);
      lastCheckpointTime = now();
      lastCheckpointStep = state.step;
      validationsAtCheckpoint = state.validations.length;
      savePolicy(join(dir, RUN_FILES.latest), policyFile(agent.policy(), 'latest', state.validations.at(-1) ?? null));
      writeSummary(summary('running'));
      log.info({ step: state.step, path: basename(path), 'time/train_seconds': metric(elapsed()) }, 'checkpoint');
    };

    // --- the loop ------------------------------------------------------------------------------
    const w = new Window();
    const stopCheck = (): string | null => {
      if (state.stopReason) return state.stopReason;
      if (o.signal?.aborted) return 'interrupted';
      if (t.stop.steps !== null && state.step >= t.stop.steps) return `stop.steps ${t.stop.steps} reached`;
      if (t.stop.seconds !== null && elapsed() >= t.stop.seconds) return `stop.seconds ${t.stop.seconds} reached`;
      return null;
    };
    /** Mean training drag of the last logged interval (for the progress line). */
    let lastTrainDrag: number | null = null;
    const progressUpdate = (): void => {
      const last = state.validations.at(-1);
      progress.update({
        done: state.step,
        total: t.stop.steps,
        elapsed: elapsed(),
        budget: t.stop.seconds,
        metrics: {
          [`val ${spec.dragName}`]: last?.drag?.toFixed(3) ?? '-',
          best: state.best?.drag?.toFixed(3) ?? '-',
          'train drag': lastTrainDrag === null ? '-' : lastTrainDrag.toFixed(3),
        },
      });
    };
    let lastLog = { time: now(), step: state.step };
    // With train.parallel false every await in the loop is on a settled promise, which never lets
    // the event loop run: signal handlers and messages (a sweep cancelling its run) would wait for
    // the end of training. So the loop yields to the event loop every YIELD_MS of wall time.
    let lastYield = performance.now();
    for (;;) {
      const reason = stopCheck();
      if (reason) {
        state.stopReason = reason;
        break;
      }
      const actions = agent.act(obs, count, true).slice();
      const stepping = env.step(actions);
      state.updateCarry += t.updatesPerStep;
      const k = Math.floor(state.updateCarry);
      state.updateCarry -= k;
      for (let i = 0; i < k; i++) {
        if (!agent.ready) break;
        const u = agent.update();
        w.critic += u.criticLoss;
        w.q += u.q;
        w.criticCount++;
        if (u.actorLoss !== null) {
          w.actor += u.actorLoss;
          w.actorCount++;
        }
      }
      const r = await stepping;
      agent.store(obs, actions, r.reward, r.nextObs, r.terminal);
      obs = r.obs;
      state.step++;
      w.steps++;
      for (let i = 0; i < r.reward.length; i++) w.reward += r.reward[i]!;
      w.rewardCount += r.reward.length;
      w.drag += r.dragSum;
      w.dragCount += r.dragCount;
      for (const e of r.episodes) {
        state.episodes++;
        w.episodes++;
        w.episodeReturn += e.return;
        if (e.diverged) w.diverged++;
        else {
          w.episodeDrag += e.drag;
          w.episodeDragCount++;
        }
        log.info(
          {
            step: state.step,
            copy: e.copy,
            seed: e.seed,
            'train/episode_return': metric(e.return),
            'train/episode_drag_ratio': metric(e.drag),
            'train/episode_actuation_power': metric(e.power),
            'train/episode_decisions': e.decisions,
            'train/episode_diverged': e.diverged,
          },
          'episode',
        );
      }
      if (state.step % t.logEvery === 0) {
        const tt = now();
        log.info(
          {
            step: state.step,
            'train/reward': metric(w.reward / w.rewardCount),
            'train/drag_ratio': metric(w.dragCount ? w.drag / w.dragCount : NaN),
            'train/episode_return': metric(w.episodes ? w.episodeReturn / w.episodes : NaN),
            'train/episode_drag_ratio': metric(w.episodeDragCount ? w.episodeDrag / w.episodeDragCount : NaN),
            'train/episodes': w.episodes,
            'train/diverged_episodes': w.diverged,
            'train/critic_loss': metric(w.criticCount ? w.critic / w.criticCount : NaN),
            'train/actor_loss': metric(w.actorCount ? w.actor / w.actorCount : NaN),
            'train/q': metric(w.criticCount ? w.q / w.criticCount : NaN),
            'train/updates': agent.updates,
            'train/transitions': agent.transitions,
            'train/steps_per_second': metric((state.step - lastLog.step) / Math.max(1e-9, tt - lastLog.time)),
            'time/train_seconds': metric(elapsed()),
          },
          'train',
        );
        lastLog = { time: tt, step: state.step };
        lastTrainDrag = w.dragCount ? w.drag / w.dragCount : null;
        w.clear();
      }
      if (t.validation.every > 0 && state.step % t.validation.every === 0) {
        await collect();
        launchValidation(true);
      }
      const byStep = t.checkpoint.everySteps > 0 && state.step - lastCheckpointStep >= t.checkpoint.everySteps;
      const byTime = t.checkpoint.everySeconds > 0 && now() - lastCheckpointTime >= t.checkpoint.everySeconds;
      if (byStep || byTime) await checkpoint();
      progressUpdate();
      if (performance.now() - lastYield >= YIELD_MS) {
        await new Promise((r) => setImmediate(r));
        lastYield = performance.now();
      }
    }

    // --- the end -----------------------------------------------------------------------------
    await collect();
    const lastValidated = state.validations.at(-1)?.step;
    if (validator && state.stopReason !== 'interrupted' && lastValidated !== state.step && state.step > 0) {
      launchValidation(false);
      await collect();
    }
    const fresh = lastCheckpointStep === state.step && validationsAtCheckpoint === state.validations.length && state.step > 0;
    if (t.checkpoint.enabled && !fresh) await checkpoint();
    else if (!t.checkpoint.enabled) savePolicy(join(dir, RUN_FILES.latest), policyFile(agent.policy(), 'latest', state.validations.at(-1) ?? null));
    if (!bestSnapshot) {
      // No validation ran: the latest policy is also the best known.
      savePolicy(join(dir, RUN_FILES.best), policyFile(agent.policy(), 'best', null));
    }
    progress.done();
    const status = state.stopReason === 'interrupted' ? 'interrupted' : 'completed';
    state.seconds = elapsed();
    sessionStart = now();
    const s = summary(status);
    writeSummary(s);
    log.info({ step: state.step, reason: state.stopReason, 'time/train_seconds': s.trainSeconds, 'eval/best_drag_ratio': state.best?.drag ?? null }, 'stop');
    return s;
  } catch (e) {
    progress.done();
    const msg = e instanceof Error ? e.message : String(e);
    log.error({ step: state.step, error: msg }, 'error');
    try {
      writeSummary(summary('failed', msg));
    } catch {
      // the original error matters more
    }
    throw e;
  } finally {
    agent.dispose();
    (agent.backend as { dispose?: () => void }).dispose?.();
    await side?.close();
    await validator?.close();
    log.flush();
  }
}

function checkpointData(
  state: TrainerState,
  agent: Agent,
  envState: EnvRunnerState,
  best: PolicySnapshot | null,
  reference: number,
  seconds: number,
): CheckpointData {
  const a = agent.getState();
  const blocks = new Map<string, Float32Array | Float64Array | Int32Array | Uint8Array | Uint32Array>();
  for (const [k, v] of a.blocks) blocks.set(`agent/${k}`, v);
  for (const [k, v] of Object.entries(envState.env.arrays)) blocks.set(`env/${k}`, v);
  blocks.set('runner/ret', envState.acc.ret);
  blocks.set('runner/drag', envState.acc.drag);
  blocks.set('runner/power', envState.acc.power);
  blocks.set('runner/n', envState.acc.n);
  if (best) {
    blocks.set('best/params', best.params);
    if (best.normalizer) {
      blocks.set('best/mean', best.normalizer.mean);
      blocks.set('best/invStd', best.normalizer.invStd);
    }
  }
  const trainer: TrainerState = { ...state, seconds };
  return {
    meta: {
      format: CHECKPOINT_FORMAT,
      step: state.step,
      trainer: JSON.parse(JSON.stringify(trainer)) as Json,
      agent: a.meta,
      backend: agent.backend.name,
      env: envState.env.meta as Json,
      runner: { rng: envState.rng as unknown as Json, seeds: envState.seeds },
      best: best ? { clip: best.normalizer?.clip ?? null } : null,
      reference,
    },
    blocks,
  };
}

function envRunnerStateFrom(data: CheckpointData): EnvRunnerState {
  const m = data.meta as unknown as { env: EnvRunnerState['env']['meta']; runner: { rng: EnvRunnerState['rng']; seeds: number[] } };
  const arrays: Record<string, Float64Array | Int32Array | Uint8Array> = {};
  for (const [k, v] of blocksUnder(data.blocks, 'env/')) arrays[k] = v as Float64Array | Int32Array | Uint8Array;
  const b = (k: string) => data.blocks.get(`runner/${k}`);
  return {
    env: { meta: m.env, arrays },
    rng: m.runner.rng,
    seeds: m.runner.seeds,
    acc: { ret: b('ret') as Float64Array, drag: b('drag') as Float64Array, power: b('power') as Float64Array, n: b('n') as Int32Array },
  };
}

function bestFrom(data: CheckpointData, agent: Agent): PolicySnapshot | null {
  const params = data.blocks.get('best/params') as Float32Array | undefined;
  if (!params) return null;
  const clip = (data.meta.best as { clip: number | null } | null)?.clip ?? null;
  const mean = data.blocks.get('best/mean') as Float64Array | undefined;
  const invStd = data.blocks.get('best/invStd') as Float64Array | undefined;
  const cur = agent.policy();
  return { spec: cur.spec, params, actionBound: cur.actionBound, normalizer: mean && invStd && clip !== null ? { mean, invStd, clip } : null };
}
