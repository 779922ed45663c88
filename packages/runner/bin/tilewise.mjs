#!/usr/bin/env node
// The tilewise command. Sources are TypeScript run through tsx (no build step).
import { register } from 'tsx/esm/api';

register();
const { main } = await import('../src/cli.ts');
process.exitCode = await main(process.argv.slice(2));
