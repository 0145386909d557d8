// Entry of a worker thread that runs TypeScript: registers tsx in this thread, then loads the
// module named by workerData.module (a file URL), which does the thread's work.
import { workerData } from 'node:worker_threads';
import { register } from 'tsx/esm/api';

register();
await import(workerData.module);
