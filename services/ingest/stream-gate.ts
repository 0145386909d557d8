/**
 * Limits on the ring streams (CSV and NDJSON bodies, read as they arrive). Each open stream
 * holds a database connection and a transaction until its body ends, so a key, or all keys
 * together, may hold only so many at once, and a stream that stops sending is ended. Without
 * these, one ingest key could hold every connection of the pool and starve the reads.
 */
import type { Readable } from 'node:stream';
import { HttpError } from '../http/errors.ts';

export interface StreamLimits {
  /** Streams open at once in this process, all keys together. */
  maxStreams: number;
  /** Streams open at once per key. */
  maxStreamsPerKey: number;
  /** A stream that sends no byte for this long is ended with 408, seconds. */
  idleS: number;
}

/** Raised when a stream sent nothing for the idle time; nothing of it is kept. */
export class StreamStalledError extends HttpError {
  constructor(idleS: number) {
    super(408, 'request_timeout', `The body stopped arriving: no byte for ${idleS} s (CANSIGHT_INGEST_STREAM_IDLE_S). Nothing of this request was stored; send it again.`);
  }
}

export class StreamGate {
  private open = 0;
  private readonly perKey = new Map<string, number>();

  constructor(private readonly limits: StreamLimits) {}

  /** Takes a place for a stream of this key, or throws 429 naming the limit; call the returned function when it ends. */
  enter(key: string): () => void {
    const mine = this.perKey.get(key) ?? 0;
    if (mine >= this.limits.maxStreamsPerKey) {
      throw new HttpError(429, 'rate_limited', `This key already has ${mine} ring streams open, the most one key may have at once (CANSIGHT_INGEST_MAX_STREAMS_PER_KEY); retry in 1 s, when one has ended, or send fewer at once.`);
    }
    if (this.open >= this.limits.maxStreams) {
      throw new HttpError(429, 'rate_limited', `${this.open} ring streams are open, the most this service takes at once (CANSIGHT_INGEST_MAX_STREAMS); retry in 1 s.`);
    }
    this.open++;
    this.perKey.set(key, mine + 1);
    let left = false;
    return () => {
      if (left) return;
      left = true;
      this.open--;
      const n = (this.perKey.get(key) ?? 1) - 1;
      if (n <= 0) this.perKey.delete(key);
      else this.perKey.set(key, n);
    };
  }

  /**
   * The stream's chunks, ending with StreamStalledError when none comes for the idle time. The
   * request stream itself is left open (not destroyed), so the 408 still reaches the client.
   */
  async *watched(source: Readable): AsyncIterable<Buffer | string> {
    const it = source[Symbol.asyncIterator]() as AsyncIterator<Buffer | string>;
    const idleMs = this.limits.idleS * 1000;
    for (;;) {
      let timer: NodeJS.Timeout | undefined;
      const idle = new Promise<never>((_, reject) => {
        timer = setTimeout(() => reject(new StreamStalledError(this.limits.idleS)), idleMs);
      });
      try {
        const r = await Promise.race([it.next(), idle]);
        if (r.done) return;
        yield r.value;
      } finally {
        clearTimeout(timer);
      }
    }
  }
}
