/**
 * Data directories of `cansight start` runs made by a test: made open to the embedded
 * PostgreSQL's own user, and removed afterwards, after stopping (SIGQUIT, by the pid in
 * postmaster.pid) a server that a failed test left running on one.
 */
import { chmod, mkdtemp, readFile, rm } from 'node:fs/promises';
import os from 'node:os';
import path from 'node:path';

export function dataDirs(prefix: string) {
  const dirs: string[] = [];
  return {
    /** A fresh directory; the embedded server's data goes to DIR/pg. */
    async make(): Promise<string> {
      const dir = await mkdtemp(path.join(os.tmpdir(), prefix));
      await chmod(dir, 0o777);
      dirs.push(dir);
      return dir;
    },
    /** Stops what still runs on each directory's DIR/pg and removes them. */
    async removeAll(): Promise<void> {
      for (const d of dirs.splice(0)) {
        const pid = Number((await readFile(path.join(d, 'pg', 'postmaster.pid'), 'utf8').catch(() => '')).split('\n')[0]);
        if (pid > 0) {
          try {
            process.kill(pid, 'SIGQUIT');
          } catch {
            // not running
          }
        }
        await rm(d, { recursive: true, force: true });
      }
    },
  };
}
