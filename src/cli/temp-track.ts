/**
 * The temporary files and folders a command line run is writing, so that a
 * signal handler (or the main thread, after the command's worker thread
 * died) can remove them. Kept apart from files.ts, which imports the whole
 * library: bin/rankfield's main thread (entry.ts) needs only this.
 */
import { rmSync, unlinkSync } from 'node:fs';
import { parentPort, workerData } from 'node:worker_threads';

/** Temporary files being written, and temporary folders in use; removed on a signal (see {@link removeTempFilesSync}). */
const pending = new Set<string>();
const pendingDirs = new Set<string>();

/** Mark a temporary folder for removal should the process be interrupted (`false`: it is removed already). */
export function trackTempDir(dir: string, active: boolean): void {
  if (active) pendingDirs.add(dir);
  else pendingDirs.delete(dir);
  // In the command's worker (see worker.ts), the main thread handles signals: tell it too.
  if (inCommandWorker()) parentPort?.postMessage({ dir, active });
}

/** Mark a temporary file for removal should the process be interrupted (`false`: renamed or removed already). */
export function trackTempFile(path: string, active: boolean): void {
  if (active) pending.add(path);
  else pending.delete(path);
  if (inCommandWorker()) parentPort?.postMessage({ tmp: path, active });
}

/** True inside the worker thread that bin/rankfield runs long commands in. */
function inCommandWorker(): boolean {
  return (workerData as { rankfieldWorker?: boolean } | null)?.rankfieldWorker === true;
}

/** Remove every temporary file still being written, and every tracked temporary folder (for signal handlers, and after a worker died). */
export function removeTempFilesSync(): void {
  for (const p of pending) {
    try {
      unlinkSync(p);
    } catch {
      // Already gone, or not removable: nothing more can be done while exiting.
    }
  }
  pending.clear();
  for (const d of pendingDirs) rmSync(d, { recursive: true, force: true });
  pendingDirs.clear();
}
