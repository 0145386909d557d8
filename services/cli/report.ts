/**
 * `cansight report --unit U --out FILE.html [--from T] [--to T] [--csv]`: writes the pre-outage
 * review of one unit (the same document as GET /v1/units/:unitId/review) to a file, for an
 * engineer to print or attach to the outage work pack. Reads only.
 */
import { writeFile } from 'node:fs/promises';
import { parseArgs } from 'node:util';
import type { Pool } from '../db/pool.ts';
import { createReadsRepository } from '../db/reads.ts';
import { createUnitsRepository } from '../db/units.ts';
import { advisesInspection, reviewData } from '../api/review/data.ts';
import { reviewHtml } from '../api/review/html.ts';
import { reviewCsv } from '../api/review/csv.ts';
import { HttpError } from '../http/errors.ts';
import type { JudgementSettings } from '../api/schemas.ts';
import { COMMANDS, UsageError } from './usage.ts';

export interface ReportContext {
  pool: Pool;
  /** The worker settings that say when a baseline falls due (for what is not judged yet). */
  settings: JudgementSettings;
  out: (line: string) => void;
  /** The instant the review is made at (default now). */
  nowMs?: number;
}

export async function reportCommand(args: string[], ctx: ReportContext): Promise<number> {
  const { values } = parseArgs({ args, options: COMMANDS.report.options, strict: true });
  if (!values.unit) throw new UsageError('report needs --unit U');
  if (!values.out) throw new UsageError('report needs --out FILE.html (or FILE.csv with --csv)');
  for (const k of ['from', 'to'] as const) {
    const v = values[k];
    if (v !== undefined && !Number.isFinite(Date.parse(v))) throw new UsageError(`--${k} "${v}" is not a time; use RFC 3339, e.g. 2026-03-01T00:00:00Z`);
  }
  const unit = await createUnitsRepository(ctx.pool).get(values.unit);
  if (!unit) {
    ctx.out(`no unit ${values.unit}`);
    return 1;
  }
  try {
    const d = await reviewData(createReadsRepository(ctx.pool), unit, { from: values.from, to: values.to }, ctx.nowMs ?? Date.now(), ctx.settings);
    await writeFile(values.out, values.csv ? reviewCsv(d) : reviewHtml(d), 'utf8');
    const top = d.chambers[0];
    ctx.out(`wrote the pre-outage review of ${unit.id} (${d.from.slice(0, 10)} to ${d.to.slice(0, 10)}) to ${values.out}`);
    if (top && advisesInspection(top.nextStep)) ctx.out(`leading chamber: ${top.chamber} (evidence ${top.score.toFixed(1)}); thermocouples to replace: ${d.replace.map((t) => t.thermocouple).join(', ') || 'none'}`);
    ctx.out("Cansight advises; the turbine's own protection and the site's procedures govern.");
    return 0;
  } catch (err) {
    if (err instanceof HttpError) throw new UsageError(err.message);
    throw err;
  }
}
