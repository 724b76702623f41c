/** Bundle the built batch worker `entry` (default dist/batch/worker.js) into `outFile` (default: in place). */
export function bundleWorker(entry?: string, outFile?: string): Promise<void>;
