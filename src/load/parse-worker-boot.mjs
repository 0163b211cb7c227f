// Worker threads start without the parent's TypeScript loader: register it, then load the worker.
import { workerData } from 'node:worker_threads';
import { register } from 'tsx/esm/api';

register();
await import(workerData.entry);
