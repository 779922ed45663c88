import { defineConfig } from 'vitest/config';

/** One configuration for the whole workspace; each package is a project. */
export default defineConfig({
  test: {
    projects: [
      { extends: true, test: { name: 'envs', root: 'packages/envs', include: ['test/**/*.test.ts'] } },
      { extends: true, test: { name: 'agent', root: 'packages/agent', include: ['test/**/*.test.ts'] } },
      { extends: true, test: { name: 'runner', root: 'packages/runner', include: ['test/**/*.test.ts'] } },
      { extends: true, test: { name: 'workspace', root: '.', include: ['test/**/*.test.ts'] } },
    ],
    testTimeout: 120_000,
    hookTimeout: 120_000,
  },
});
