// Entry of an ExternalEnv's I/O thread (env.ts). Sources are TypeScript run through tsx, as in
// bin/tilewise.mjs; a worker does not inherit the parent's loader, so it registers its own.
import { register } from 'tsx/esm/api';

register();
await import('./link-worker.ts');
