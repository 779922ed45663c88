// The sandboxed processor of `tilewise sweep-worker` (queue.ts): BullMQ forks a process that
// imports this file and calls its default export for each job. Sources are TypeScript run
// through tsx, as in bin/tilewise.mjs; the forked process registers its own loader.
import { register } from 'tsx/esm/api';

register();
const { processRunJob } = await import('./processor.ts');
export default processRunJob;
