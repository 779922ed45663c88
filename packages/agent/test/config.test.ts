import { ConfigError } from '@tilewise/envs';
import { describe, expect, it } from 'vitest';
import { parseAgentConfig, PRESETS } from '../src/config';

describe('agent config', () => {
  it('fills every field from the td3 preset by default', () => {
    const c = parseAgentConfig(undefined);
    expect(c).toEqual({ algo: 'td3', backend: 'auto', ...PRESETS.td3 });
    // Spot-check values against their sources (see config.ts): Fujimoto et al. 2018.
    expect(c.critics).toBe(2);
    expect(c.policyDelay).toBe(2);
    expect(c.targetNoise).toEqual({ std: 0.2, clip: 0.5 });
    expect(c.tau).toBe(0.005);
    expect(c.exploration).toEqual({ kind: 'gaussian', std: 0.1 });
  });

  it('takes the ddpg preset and keeps user overrides field by field', () => {
    const c = parseAgentConfig({ algo: 'ddpg', tau: 0.01, actor: { hidden: [32] }, exploration: { kind: 'ou', sigma: 0.3 } });
    expect(c.critics).toBe(1);
    expect(c.policyDelay).toBe(1);
    expect(c.targetNoise).toBeNull();
    expect(c.actorLr).toBe(1e-4); // Lillicrap et al. 2016, Section 7
    expect(c.criticLr).toBe(1e-3);
    expect(c.tau).toBe(0.01);
    expect(c.actor).toEqual({ hidden: [32], activation: 'relu' });
    expect(c.critic).toEqual({ hidden: [400, 300], activation: 'relu' });
    expect(c.exploration).toEqual({ kind: 'ou', theta: 0.15, sigma: 0.3, dt: 1 });
  });

  it('accepts its own resolved output unchanged', () => {
    const c = parseAgentConfig({ algo: 'ddpg', batchSize: 32 });
    expect(parseAgentConfig(c)).toEqual(c);
  });

  it('names the field path and the value of a bad entry', () => {
    expect(() => parseAgentConfig({ gamma: 1.5 })).toThrow(ConfigError);
    expect(() => parseAgentConfig({ gamma: 1.5 })).toThrow(/agent\.gamma: .*\(got 1\.5\)/);
    expect(() => parseAgentConfig({ critic: { hidden: [64, -1] } })).toThrow(/agent\.critic\.hidden\[1\]: .*\(got -1\)/);
    expect(() => parseAgentConfig({ exploration: { kind: 'ou', theta: 0 } })).toThrow(/agent\.exploration\.theta: .*\(got 0\)/);
    expect(() => parseAgentConfig({ backend: 'gpu' }, 'run.agent')).toThrow(/run\.agent\.backend: .*\(got "gpu"\)/);
  });

  it('rejects unknown keys', () => {
    expect(() => parseAgentConfig({ learningRate: 1e-3 })).toThrow(/agent: unknown key agent\.learningRate/);
    expect(() => parseAgentConfig({ actor: { width: 64 } })).toThrow(/unknown key agent\.actor\.width/);
  });

  it('rejects incompatible combinations instead of fixing them', () => {
    expect(() => parseAgentConfig({ algo: 'ddpg', critics: 2 })).toThrow(/agent\.critics: expected 1 \(ddpg is the td3 update/);
    expect(() => parseAgentConfig({ algo: 'ddpg', policyDelay: 2 })).toThrow(/agent\.policyDelay: expected 1/);
    expect(() => parseAgentConfig({ algo: 'ddpg', targetNoise: { std: 0.1 } })).toThrow(/agent\.targetNoise: expected null/);
    expect(() => parseAgentConfig({ batchSize: 512, replayCapacity: 100 })).toThrow(/agent\.batchSize: expected at most replayCapacity \(100\) \(got 512\)/);
  });
});
