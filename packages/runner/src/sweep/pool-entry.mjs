// Entry of a local sweep's run processes (pool.ts). Sources are TypeScript run through tsx, as in
// bin/tilewise.mjs; a child process does not inherit the parent's loader, so it registers its own.
import { register } from 'tsx/esm/api';

register();
await import('./pool-child.ts');
