/**
 * The pre-outage review as CSV: one row per chamber (ranked) and per thermocouple, then the
 * window, what is not judged yet and the caution, under one header of REVIEW_CSV_COLUMNS.
 * Temperatures in °C; lines end in CRLF.
 */
import type { ReviewData } from './data.ts';

/**
 * One CSV cell. A text cell that a spreadsheet would read as a formula (one starting with =, +,
 * -, @, a tab or a carriage return) gets a leading apostrophe, so opening the file runs nothing
 * (OWASP, CSV injection); numbers are written as numbers.
 */
export function csvCell(v: unknown): string {
  if (v === null || v === undefined) return '';
  let s = typeof v === 'number' ? (Number.isFinite(v) ? String(Math.round(v * 1000) / 1000) : '') : String(v);
  if (typeof v !== 'number' && /^[=+\-@\t\r]/.test(s)) s = "'" + s;
  return /[",\n\r]/.test(s) ? `"${s.replace(/"/g, '""')}"` : s;
}

export const REVIEW_CSV_COLUMNS = ['section', 'subject', 'number', 'rank', 'evidence', 'residual_c', 'drift_c_per_30d', 'drift_low_c_per_30d', 'drift_high_c_per_30d', 'cusum', 'alerts_in_window', 'worst_grade_in_window', 'invalid_share', 'advice'];

export function reviewCsv(d: ReviewData): string {
  const lines = [REVIEW_CSV_COLUMNS.join(',')];
  const push = (cells: unknown[]) => lines.push(cells.map(csvCell).join(','));
  for (const c of d.chambers) {
    push(['chamber', 'chamber', c.chamber, c.rank, c.score, c.residualC, c.driftCPer30d, c.driftIntervalCPer30d?.[0], c.driftIntervalCPer30d?.[1], c.cusum?.signal ?? (c.cusum ? 'in_control' : ''), c.alertsInWindow, c.worstGradeInWindow, '', c.nextStep]);
  }
  for (const t of d.thermocouples) {
    push(['thermocouple', t.replace ? 'replace' : 'keep', t.thermocouple, '', '', t.residualC, t.driftCPer30d, t.driftIntervalCPer30d?.[0], t.driftIntervalCPer30d?.[1], '', d.alerts.filter((a) => a.thermocouple === t.thermocouple).length, '', t.invalidShare, t.verdict]);
  }
  push(['window', `${d.from} to ${d.to}`, '', '', '', '', '', '', '', '', d.alerts.length, '', '', d.baseline ? `baseline version ${d.baseline.version}` : 'no baseline']);
  for (const x of d.notJudged) push(['not_judged', x.part, '', '', '', '', '', '', '', '', '', '', '', x.reason]);
  push(['caution', '', '', '', '', '', '', '', '', '', '', '', '', d.caution]);
  return lines.join('\r\n') + '\r\n';
}
