/** The generated config reference (src/fields.ts) and its copy in docs/runner.md. */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { SECTIONS } from '../src/config';
import { fieldReference, sectionReference } from '../src/fields';

describe('config field reference (tilewise config --fields)', () => {
  it('lists every field of every section with its doc, and docs/runner.md holds the current tables of the runner sections', () => {
    const ref = fieldReference();
    for (const f of ['env.haloTiles', 'agent.gamma', 'train.stop.seconds', 'train.validation.every', 'train.checkpoint.keep', 'evaluation.transfer', 'baselines.gainSweep.min']) {
      expect(ref, f).toMatch(new RegExp(`\\| \`${f.replaceAll('.', '\\.')}\` \\| [^|]+ \\| .*\\S.* \\|`));
    }
    // The runner's own sections must match the docs exactly; the env and agent sections belong
    // to their packages (and change with them): `tilewise config --fields` prints them current.
    const docs = readFileSync(new URL('../../../docs/runner.md', import.meta.url), 'utf8');
    for (const name of ['train', 'evaluation', 'baselines'] as const) {
      expect(docs.includes(sectionReference(name, SECTIONS[name], name)), `docs/runner.md: regenerate the ${name} table with \`tilewise config --fields\``).toBe(true);
    }
  });
});
