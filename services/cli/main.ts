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
import { openRuntime, runUntilStopped } from './runtime.ts';
import { serve } from './serve.ts';
import { startWorker } from '../worker/index.ts';
import { COMMANDS, helpFor, usage, UsageError, wantsHelp, type CommandSpec } from './usage.ts';

const out = (line: string) => process.stdout.write(line + '\n');

/** Refuses an option the command does not take before any database is opened. */
function checkArgs(spec: CommandSpec | undefined, args: string[]): void {
  if (spec) parseArgs({ args, options: spec.options, strict: true, allowPositionals: spec.operands !== undefined });
}

const KEYS_SPECS: Record<string, CommandSpec> = { create: COMMANDS.keysCreate, list: COMMANDS.keysList, revoke: COMMANDS.keysRevoke, 'rotate-admin': COMMANDS.keysRotateAdmin };

async function run(argv: string[]): Promise<number> {
  const [command, ...rest] = argv;
  if (command !== undefined && wantsHelp(rest)) {
    // `cansight keys create --help` explains keys create; `cansight keys --help` every keys command.
    const sub = command === 'keys' && rest[0] && !rest[0].startsWith('-') ? `keys ${rest[0]}` : command;
    const text = helpFor(sub) ?? helpFor(command);
    if (text) {
      out(text);
      return 0;
    }
  }
  switch (command) {
    case 'start': {
      const { values } = parseArgs({ args: rest, options: COMMANDS.start.options, strict: true });
      await serve(loadConfigOrExit(), { parts: { api: true, ingest: true }, worker: true, demo: !values['no-demo'], announce: true });
      return 0;
    }
    case 'api':
    case 'ingest': {
      parseArgs({ args: rest, options: COMMANDS[command].options, strict: true });
      await serve(loadConfigOrExit(), { parts: { api: command === 'api', ingest: command === 'ingest' }, worker: false, demo: false, announce: false });
      return 0;
    }
    case 'worker': {
      parseArgs({ args: rest, options: COMMANDS.worker.options, strict: true });
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'worker' });
      await runUntilStopped(runtime, startWorker({ pool: runtime.pool, logger: runtime.logger, config: runtime.config }).then((worker) => runtime.onShutdown(() => worker.stop())));
      return 0;
    }
    case 'migrate': {
      parseArgs({ args: rest, options: COMMANDS.migrate.options, strict: true });
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'migrate' });
      await runtime.shutdown();
      out('migrations are current');
      return 0;
    }
    case 'keys': {
      checkArgs(KEYS_SPECS[rest[0]], rest.slice(1));
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'keys' });
      try {
        return await keysCommand(rest, runtime.pool, out, runtime.config.adminKey);
      } finally {
        await runtime.shutdown();
      }
    }
    case 'import': {
      checkArgs(COMMANDS.import, rest);
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
      checkArgs(COMMANDS.report, rest);
      const runtime = await openRuntime(loadConfigOrExit(), { migrate: true, role: 'report' });
      try {
        return await reportCommand(rest, { pool: runtime.pool, out, settings: runtime.config.worker });
      } finally {
        await runtime.shutdown();
      }
    }
    case undefined:
    case 'help':
    case '--help':
    case '-h':
      out(usage());
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
      // The help of the command that was misused, or the whole list for an unknown one.
      const [command, sub] = argv;
      const help = (command === 'keys' && sub ? helpFor(`keys ${sub}`) : null) ?? (command ? helpFor(command) : null) ?? usage();
      process.stderr.write(`cansight: ${(err as Error).message}\n\n${help}\n`);
      process.exitCode = 2;
      return;
    }
    process.stderr.write(`cansight: ${(err as Error).message}\n`);
    process.exitCode = 1;
  }
}
