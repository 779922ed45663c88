import { defineConfig } from 'vitest/config';

/** One configuration for the whole workspace; each package is a project. */
export default defineConfig({
  test: {
    projects: [
      { test: { name: 'envs', root: 'packages/envs', include: ['test/**/*.test.ts'] } },
      { test: { name: 'agent', root: 'packages/agent', include: ['test/**/*.test.ts'] } },
      { test: { name: 'runner', root: 'packages/runner', include: ['test/**/*.test.ts'] } },
      { test: { name: 'workspace', root: '.', include: ['test/**/*.test.ts'] } },
    ],
    testTimeout: 120_000,
    hookTimeout: 120_000,
  },
});
