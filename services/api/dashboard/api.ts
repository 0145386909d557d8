/**
 * The page's one door to the server: every request carries the pasted key (kept in
 * sessionStorage, so it is gone when the tab closes), and every refusal arrives as an ApiError
 * with the server's own sentence.
 */
import type { StartCountersRecord, StartDetail as StoredStartDetail, StartSummary } from '../../db/starts.ts';

const KEY_SLOT = 'cansight.key';
const NAME_SLOT = 'cansight.name';

export class ApiError extends Error {
  constructor(public readonly status: number, public readonly code: string, message: string) {
    super(message);
  }
}

export function storedKey(): string | null {
  return sessionStorage.getItem(KEY_SLOT);
}

export function storeKey(key: string | null): void {
  if (key) sessionStorage.setItem(KEY_SLOT, key);
  else sessionStorage.removeItem(KEY_SLOT);
}

export function storedName(): string {
  return sessionStorage.getItem(NAME_SLOT) ?? '';
}

export function storeName(name: string): void {
  sessionStorage.setItem(NAME_SLOT, name);
}

async function call(method: string, url: string, body?: unknown, accept = 'application/json'): Promise<Response> {
  const key = storedKey();
  if (!key) throw new ApiError(401, 'unauthorized', 'Paste an API key above to see the fleet.');
  const headers: Record<string, string> = { authorization: `Bearer ${key}`, accept };
  if (body !== undefined) headers['content-type'] = 'application/json';
  const res = await fetch(url, { method, headers, body: body === undefined ? undefined : JSON.stringify(body) });
  if (!res.ok) {
    let code = 'error';
    let message = `The server answered ${res.status}.`;
    try {
      const e = (await res.json()) as { error?: string; message?: string };
      code = e.error ?? code;
      message = e.message ?? message;
    } catch {
      /* not JSON: keep the status sentence */
    }
    throw new ApiError(res.status, code, message);
  }
  return res;
}

export async function getJson<T>(url: string): Promise<T> {
  return (await call('GET', url)).json() as Promise<T>;
}

export async function getText(url: string, accept = 'image/svg+xml'): Promise<string> {
  return (await call('GET', url, undefined, accept)).text();
}

export async function postJson<T>(url: string, body: unknown): Promise<T> {
  return (await call('POST', url, body)).json() as Promise<T>;
}

/** Shapes of the payloads the page reads (the fields it uses). */
export type Grade = 'notice' | 'warning' | 'alarm' | 'critical';

export interface Who {
  role: string;
  keyId: string;
  units: string[] | null;
  canAct: boolean;
}

export interface FleetRow {
  unitId: string;
  name: string;
  site: string;
  temperatureUnit: 'C' | 'F';
  lastRingTs: string | null;
  lastAnalysisTs: string | null;
  freshness: 'live' | 'late' | 'silent' | 'no_data';
  spreadC: number | null;
  spreadLimitC: number | null;
  loadFraction: number | null;
  worstGrade: Grade | null;
  activeAlerts: number;
  unacknowledged: number;
  shelvedAlerts: number;
  coverage: { valid: number; total: number } | null;
}

export interface Alert {
  id: string;
  unitId: string;
  kind: string;
  grade: Grade;
  chamber: number | null;
  thermocouple: number | null;
  active: boolean;
  acknowledged: boolean;
  shelvedUntil: string | null;
  raisedAt: string;
  lastChangedAt: string;
  clearedAt: string | null;
  message: string;
  advice: string;
  evidence: Record<string, unknown>;
  history?: Array<{ at: string; action: string; grade: string; by?: string | null; comment?: string | null }>;
}

export interface ChamberRow {
  chamber: number;
  angleDeg: number;
  plumeAngleDeg: number | null;
  deviationC: number | null;
  residualC: number | null;
  uncertaintyC: number | null;
  /** false: no estimate in the latest ring (see notObservableReason). */
  observable: boolean;
  notObservableReason: string | null;
  driftCPer30d: number | null;
  driftIntervalCPer30d: [number, number] | null;
  driftCPer1000h: number | null;
  cusum: { upper: number; lower: number; signal: 'up' | 'down' | null } | null;
  baselineVersion: number | null;
  activeGrade: Grade | null;
}

export interface ThermocoupleRow {
  thermocouple: number;
  angleDeg: number;
  chamberBehind: number | null;
  valid: boolean;
  reason: string | null;
  residualC: number | null;
  driftCPer30d: number | null;
  invalidShare: number | null;
  invalidReasons: Record<string, number>;
  replace: boolean;
}

/** Starts as the /v1/units/:unitId/starts routes serve them: the read repository's shapes, without the trace. */
export type { StartSummary } from '../../db/starts.ts';

export interface StartList {
  unitId: string;
  from: string;
  to: string;
  counters: Omit<StartCountersRecord, 'unitId'>;
  starts: StartSummary[];
}

export type StartDetail = Omit<StoredStartDetail, 'trace'> & { unitId: string; caution: string };
