/**
 * A long NDJSON stream is stored in bounded memory: the body is generated as a stream, sent
 * over a real socket, and the process heap (after a full collection, sampled every 10,000
 * lines) must not grow with the stream's length. A 20,000-ring and a 200,000-ring stream are
 * compared: if the server held the body or the rings, the second would grow about ten times
 * as much.
 */
import http from 'node:http';
import type { AddressInfo } from 'node:net';
import { Readable } from 'node:stream';
import v8 from 'node:v8';
import vm from 'node:vm';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { bearer, createTestApp, type TestApp } from '../helpers/app.ts';
import { count, registerUnit, TC } from './fixtures.ts';

v8.setFlagsFromString('--expose-gc');
const gc = (globalThis.gc ?? vm.runInNewContext('gc')) as () => void;

let t: TestApp;
let port: number;
beforeAll(async () => {
  t = await createTestApp();
  await registerUnit(t, 'mem-a');
  await registerUnit(t, 'mem-b');
  await t.app.listen({ host: '127.0.0.1', port: 0 });
  port = (t.app.server.address() as AddressInfo).port;
});
afterAll(async () => t?.close());

const heap = () => {
  gc();
  return process.memoryUsage().heapUsed;
};

function line(unitId: string, i: number): string {
  let ex = '';
  for (let k = 0; k < TC; k++) ex += (k ? ',' : '') + (550 + ((i + k * 7) % 23) + 0.5);
  const ts = new Date(Date.UTC(2026, 0, 20) + i * 1000).toISOString();
  return `{"unitId":"${unitId}","ts":"${ts}","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[${ex}]}\n`;
}

/** Streams n rings and returns the reply and the largest heap growth seen while it ran. */
async function streamRings(unitId: string, n: number): Promise<{ reply: Record<string, number>; growth: number; samples: number }> {
  const base = heap();
  let peak = 0;
  let samples = 0;
  async function* body() {
    const perChunk = 500;
    for (let i = 0; i < n; i += perChunk) {
      let text = '';
      for (let k = i; k < Math.min(n, i + perChunk); k++) text += line(unitId, k);
      yield text;
      if ((i + perChunk) % 10_000 === 0) {
        // Let the server catch up with what was sent, then measure what it retains.
        await new Promise((r) => setTimeout(r, 5));
        peak = Math.max(peak, heap() - base);
        samples++;
      }
    }
  }
  const reply = await new Promise<Record<string, number>>((resolve, reject) => {
    const req = http.request({ host: '127.0.0.1', port, method: 'POST', path: '/v1/rings', headers: { ...bearer(t.keys.ingest), 'content-type': 'application/x-ndjson' } }, (res) => {
      let text = '';
      res.setEncoding('utf8');
      res.on('data', (c) => (text += c));
      res.on('end', () => (res.statusCode === 200 ? resolve(JSON.parse(text)) : reject(new Error(`${res.statusCode} ${text}`))));
    });
    req.on('error', reject);
    Readable.from(body()).pipe(req);
  });
  return { reply, growth: peak, samples };
}

describe('a 200,000-ring NDJSON stream', () => {
  it('is stored whole while the heap stays bounded, not growing with the stream length', async () => {
    const small = await streamRings('mem-a', 20_000);
    const large = await streamRings('mem-b', 200_000);
    expect(small.reply).toMatchObject({ accepted: 20_000, duplicates: 0, rejectedCount: 0 });
    expect(large.reply).toMatchObject({ accepted: 200_000, duplicates: 0, rejectedCount: 0 });
    expect(await count(t, 'mem-b')).toBe(200_000);
    const mb = (b: number) => (b / 1048576).toFixed(1);
    process.stdout.write(`heap growth: 20,000 rings ${mb(small.growth)} MiB (${small.samples} samples), 200,000 rings ${mb(large.growth)} MiB (${large.samples} samples), body ~${mb(200_000 * line('mem-b', 0).length)} MiB\n`);
    expect(large.samples).toBe(20);
    // Ten times the stream: the growth must stay far below ten times (noise floor 4 MiB).
    expect(large.growth).toBeLessThan(3 * Math.max(small.growth, 4 * 1048576));
    expect(large.growth).toBeLessThan(48 * 1048576);
  });
});
