/**
 * The `cansight` command: parses the first word and hands over to the command's module.
 * Exit codes: 0 done, 1 the command failed, 2 wrong usage or bad configuration.
 */
import { parseArgs } from 'node:util';
import { loadConfigOrExit } from '../db/config.ts';
import { keysCommand } from './keys.ts';
import { reportCommand } from './report.ts';
import { importCommand } from './import.ts';
import { demoCommand } from './demo.ts';
import { openRuntime, stopOnSignals } from './runtime.ts';
import { serve } from './serve.ts';
import { startWorker } from '../worker/index.ts';
import { USAGE, UsageError } from './usage.ts';

const out = (line: string) => process.stdout.write(line + '\n');

async function run(argv: string[]): Promise<number> {
  const [command, ...rest] = argv;
  switch (command) {
    case 'start': {
      const { values } = parseArgs({ args: rest, options: { 'no-demo': { type: 'boolean', default: false } }, strict: true });
      await serve(loadConfigOrExit(), { parts: { api: true, ingest: true }, worker: true, demo: !values['no-demo'], announce: true });
      return 0;
    }
    case 'api':
    case 'ingest': {
      parseArgs({ args: rest, options: {}, strict: true });
      await serve(loadConfigOrExit(), { parts: { api: command === 'api', ingest: command === 'ingest' }, worker: false, demo: false, announce: false });
      return 0;
    }
    case 'worker': {
      parseArgs({ args: rest, options: {}, strict: true });
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'worker' });
      const stopped = stopOnSignals(runtime);
      const worker = await startWorker({ pool: runtime.pool, logger: runtime.logger, config: runtime.config });
      runtime.onShutdown(() => worker.stop());
      await stopped;
      return 0;
    }
    case 'migrate': {
      parseArgs({ args: rest, options: {}, strict: true });
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'migrate' });
      await runtime.shutdown();
      out('migrations are current');
      return 0;
    }
    case 'keys': {
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'keys' });
      try {
        return await keysCommand(rest, runtime.pool, out);
      } finally {
        await runtime.shutdown();
      }
    }
    case 'import': {
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'import' });
      try {
        return await importCommand(rest, { pool: runtime.pool, config: runtime.config, logger: runtime.logger });
      } finally {
        await runtime.shutdown();
      }
    }
    case 'demo':
      return demoCommand(rest);
    case 'report': {
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'report' });
      try {
        return await reportCommand(rest, { pool: runtime.pool, out });
      } finally {
        await runtime.shutdown();
      }
    }
    case undefined:
    case 'help':
    case '--help':
    case '-h':
      out(USAGE);
      return command === undefined ? 2 : 0;
    default:
      throw new UsageError(`unknown command "${command}"`);
  }
}

export async function main(argv: string[]): Promise<void> {
  try {
    const code = await run(argv);
    process.exitCode = code;
  } catch (err) {
    if (err instanceof UsageError || (err as { code?: string }).code?.startsWith('ERR_PARSE_ARGS')) {
      process.stderr.write(`cansight: ${(err as Error).message}\n\n${USAGE}\n`);
      process.exitCode = 2;
      return;
    }
    process.stderr.write(`cansight: ${(err as Error).message}\n`);
    process.exitCode = 1;
  }
}
