/**
 * System compilers for the export and client tests. CI (CI=true) and root machines must have
 * them (scripts/test-all.sh installs gcc and gfortran): there a missing compiler fails the tests.
 * Only on a developer machine without root are the tests skipped, with a loud message.
 */
import { execFileSync, spawnSync } from 'node:child_process';

export function hasCompiler(cmd: 'gcc' | 'gfortran'): boolean {
  return spawnSync(cmd, ['--version'], { stdio: 'ignore' }).status === 0;
}

/** True when the tests needing `cmd` should be skipped (prints why); never in CI or as root. */
export function skipWithout(cmd: 'gcc' | 'gfortran'): boolean {
  if (hasCompiler(cmd)) return false;
  const mustRun = process.env.CI === 'true' || process.getuid?.() === 0;
  if (mustRun) return false; // the tests run and fail, naming the missing compiler
  const bar = '!'.repeat(78);
  console.warn(`\n${bar}\n!! ${cmd} is missing: the tests that compile exported code with ${cmd} are SKIPPED.\n!! Install it (Debian: apt-get install ${cmd}) or run scripts/test-all.sh as root.\n${bar}\n`);
  return true;
}

/** Run a compiler, turning its diagnostics into the error message. */
export function compile(cmd: 'gcc' | 'gfortran', args: string[], cwd?: string): void {
  if (!hasCompiler(cmd)) throw new Error(`${cmd} is not installed (Debian: apt-get install ${cmd}); scripts/test-all.sh installs it when run as root`);
  try {
    execFileSync(cmd, args, { cwd, stdio: ['ignore', 'pipe', 'pipe'] });
  } catch (e) {
    const err = e as { stderr?: Buffer; stdout?: Buffer };
    throw new Error(`${cmd} ${args.join(' ')} failed:\n${err.stderr?.toString() ?? ''}${err.stdout?.toString() ?? ''}`);
  }
}
