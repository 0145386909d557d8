/**
 * One ingest run: rings come in one at a time (already validated), are encoded into chunks for
 * the ring table and written chunk by chunk into one transaction, which commits at the end.
 * Also keeps the tally of the reply: accepted, duplicates, rejected (the first ones listed, all
 * counted). No HTTP and no parsing here; the routes and the import command both use it.
 */
import type { Pool } from '../db/pool.ts';
import { RingCopyEncoder, RingWrite, type RingRow } from '../db/rings.ts';
import { unitVersionsMany, type ConfigVersionRecord } from '../db/units.ts';

export interface RejectedRing {
  /** Position of the ring: array index from 0 (JSON batch), line number from 1 (NDJSON), data row from 1 (CSV). */
  index: number;
  field: string;
  reason: string;
}

export interface IngestTally {
  accepted: number;
  duplicates: number;
  rejected: RejectedRing[];
  /** All rejected rings; `rejected` lists at most the first maxListed of them. */
  rejectedCount: number;
}

export interface IngestRunOptions {
  chunkRings: number;
  /** How many rejections the reply lists (all are counted). */
  maxListed?: number;
  /** Commit every this many rings and start a new transaction (the import command); default: once at the end. */
  commitEveryRings?: number;
  /** Told after each commit, with the rings committed so far. */
  onCommit?: (tally: IngestTally) => void;
}

export const DEFAULT_MAX_LISTED = 1000;

/**
 * A chunk's write runs while the next chunk is read and encoded (two encoders take turns), so
 * reading and PostgreSQL work overlap; at most one write is in flight. Its outcome is taken in
 * before the next write, before any other statement on the connection, and before the commit.
 */
export class IngestRun {
  private enc: RingCopyEncoder;
  private spare: RingCopyEncoder | null = null;
  private write: RingWrite | null = null;
  private inFlight: Promise<void> | null = null;
  private pendingError: unknown = null;
  /** Rings in the write in flight. */
  private inFlightRings = 0;
  private sinceCommit = 0;
  readonly tally: IngestTally = { accepted: 0, duplicates: 0, rejected: [], rejectedCount: 0 };
  private readonly maxListed: number;
  /** Rings accepted and already committed (with commitEveryRings, before the end). */
  committedAccepted = 0;
  private readonly units = new Set<string>();
  private lastUnit = '';

  constructor(private readonly pool: Pool, private readonly opts: IngestRunOptions) {
    this.enc = this.encoder();
    this.maxListed = opts.maxListed ?? DEFAULT_MAX_LISTED;
  }

  private encoder(): RingCopyEncoder {
    return new RingCopyEncoder(Math.min(64 << 20, Math.max(1 << 16, this.opts.chunkRings * 320)));
  }

  private async session(): Promise<RingWrite> {
    if (this.write === null) this.write = await RingWrite.open(this.pool);
    return this.write;
  }

  /** Waits for the write in flight, if any; throws its error. */
  private async settle(): Promise<void> {
    const p = this.inFlight;
    if (p !== null) {
      this.inFlight = null;
      await p;
    }
    if (this.pendingError !== null) {
      const err = this.pendingError;
      this.pendingError = null;
      throw err;
    }
  }

  /**
   * Configuration versions of a unit, read on this run's own connection so that a run never
   * holds one connection while waiting for a second. [] for an unknown unit.
   */
  async unitVersions(unitId: string): Promise<ConfigVersionRecord[]> {
    return (await this.unitVersionsMany([unitId])).get(unitId) ?? [];
  }

  /** The configuration versions of many units in one statement, on this run's connection; unknown units are missing. */
  async unitVersionsMany(unitIds: readonly string[]): Promise<Map<string, ConfigVersionRecord[]>> {
    await this.settle();
    const w = await this.session();
    return unitVersionsMany(await w.connection(), unitIds);
  }

  reject(index: number, field: string, reason: string): void {
    this.tally.rejectedCount++;
    if (this.tally.rejected.length < this.maxListed) this.tally.rejected.push({ index, field, reason });
  }

  /** Adds a ring; true when the chunk is full and flush() should be awaited before the next. */
  add(ring: RingRow): boolean {
    this.enc.add(ring);
    if (ring.unitId !== this.lastUnit) {
      this.lastUnit = ring.unitId;
      this.units.add(ring.unitId);
    }
    return this.enc.count >= this.opts.chunkRings;
  }

  /** The units this run has taken rings for. */
  get unitIds(): string[] {
    return [...this.units];
  }

  /** Rings added and not yet written (being encoded, or in the write in flight). */
  get pending(): number {
    return this.enc.count + this.inFlightRings;
  }

  /**
   * Starts writing the pending rings (after the write before them has finished) and returns;
   * the next chunk is encoded meanwhile.
   */
  async flush(): Promise<void> {
    if (this.enc.count === 0) return;
    await this.settle();
    if (this.opts.commitEveryRings !== undefined && this.sinceCommit >= this.opts.commitEveryRings) await this.commit();
    const w = await this.session();
    const enc = this.enc;
    this.enc = this.spare ?? this.encoder();
    this.spare = null;
    const n = enc.count;
    this.sinceCommit += n;
    this.inFlightRings = n;
    this.inFlight = w.write(enc).then(
      (r) => {
        this.inFlightRings = 0;
        this.tally.accepted += r.accepted;
        this.tally.duplicates += r.duplicates;
        enc.reset();
        this.spare = enc;
      },
      (err: unknown) => {
        this.inFlightRings = 0;
        this.pendingError = err;
      },
    );
  }

  private async commit(): Promise<void> {
    await this.settle();
    const w = this.write;
    this.write = null;
    this.sinceCommit = 0;
    if (w) await w.commit();
    this.committedAccepted = this.tally.accepted;
    this.opts.onCommit?.(this.tally);
  }

  /** Writes what is pending and commits; the tally then counts only committed rings as accepted. */
  async finish(): Promise<IngestTally> {
    try {
      await this.flush();
      await this.commit();
    } catch (err) {
      await this.abort();
      throw err;
    }
    return this.tally;
  }

  /** Abandons the uncommitted part; nothing of it becomes visible. */
  async abort(): Promise<void> {
    const p = this.inFlight;
    this.inFlight = null;
    this.pendingError = null;
    if (p !== null) await p; // never rejects: its error was kept, and is dropped with the write
    const w = this.write;
    this.write = null;
    this.enc.reset();
    if (w) await w.rollback();
  }
}
