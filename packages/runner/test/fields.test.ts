/** The generated config reference (src/fields.ts) and its copy in docs/runner.md. */
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { fieldReference } from '../src/fields';

describe('config field reference (tilewise config --fields)', () => {
  it('lists every field of every section with its doc, and docs/runner.md holds the current one', () => {
    const ref = fieldReference();
    for (const f of ['env.haloTiles', 'agent.gamma', 'train.stop.seconds', 'train.validation.every', 'train.checkpoint.keep', 'evaluation.transfer', 'baselines.gainSweep.min']) {
      expect(ref, f).toMatch(new RegExp(`\\| \`${f.replaceAll('.', '\\.')}\` \\| [^|]+ \\| .*\\S.* \\|`));
    }
    const docs = readFileSync(new URL('../../../docs/runner.md', import.meta.url), 'utf8');
    expect(docs.includes(ref), 'docs/runner.md: regenerate the field reference with `tilewise config --fields`').toBe(true);
  });
});
