/**
 * The run log: pino JSON lines in <run>/log.jsonl, one object per event, written
 * synchronously (a crash loses nothing already logged). Every line has pino's `level`,
 * `time` (ms since the epoch) and `msg` (the event: start, train, episode, validation, best,
 * checkpoint, event, stop, evaluation, resume, error) plus `run` and `step`; metric values use
 * namespaced keys: train/... (training), eval/... (validation and evaluation), time/...
 * Documented in docs/runner.md.
 */
import pino, { type Logger } from 'pino';

export type RunLogger = Logger;

export function createRunLogger(path: string, run: string): RunLogger {
  return pino({ base: { run }, messageKey: 'msg' }, pino.destination({ dest: path, append: true, sync: true, mkdir: true }));
}

/** Round a metric for the log (keeps the log compact; 6 significant digits). */
export function metric(x: number | null | undefined): number | null {
  if (x === null || x === undefined || !Number.isFinite(x)) return null;
  return Number(x.toPrecision(6));
}
