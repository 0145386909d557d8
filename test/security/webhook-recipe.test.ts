/**
 * The webhook check SECURITY.md gives receivers, run as written against a real delivery: it
 * takes the delivery, and refuses a changed body, a changed timestamp and a replay outside its
 * window.
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import http from 'node:http';
import type { AddressInfo } from 'node:net';
import os from 'node:os';
import path from 'node:path';
import { pathToFileURL } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestDatabase, type TestDatabase } from '../helpers/db.ts';
import { addUnit, apply, finding, obs, settings } from '../helpers/alerts.ts';
import { createWebhook } from '../../services/db/webhooks.ts';
import { deliverDueWebhooks } from '../../services/worker/alert-jobs.ts';

type Verify = (headers: http.IncomingHttpHeaders, body: Buffer, secret: string, now?: number) => boolean;

let db: TestDatabase;
let dir: string;
let verify: Verify;
beforeAll(async () => {
  db = await createTestDatabase();
  const doc = readFileSync(path.resolve('SECURITY.md'), 'utf8');
  const code = /```js\n([\s\S]*?)```/.exec(doc)?.[1];
  expect(code, 'SECURITY.md has a js block').toBeTruthy();
  dir = mkdtempSync(path.join(os.tmpdir(), 'cansight-recipe-'));
  writeFileSync(path.join(dir, 'verify.mjs'), code!);
  verify = (await import(pathToFileURL(path.join(dir, 'verify.mjs')).href)).verifyCansight;
});
afterAll(async () => {
  await db.drop();
  rmSync(dir, { recursive: true, force: true });
});

describe('the webhook check of SECURITY.md', () => {
  it('takes a real delivery, and refuses it changed or replayed late', async () => {
    const got: Array<{ headers: http.IncomingHttpHeaders; body: Buffer }> = [];
    const server = http.createServer((req, res) => {
      const chunks: Buffer[] = [];
      req.on('data', (c) => chunks.push(c));
      req.on('end', () => {
        got.push({ headers: req.headers, body: Buffer.concat(chunks) });
        res.statusCode = 204;
        res.end();
      });
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    try {
      const secret = 'recipe-secret-0123456789';
      await addUnit(db.pool, 'recipe-1');
      await createWebhook(db.pool, { url: `http://127.0.0.1:${(server.address() as AddressInfo).port}/hook`, minGrade: 'warning', secret, unitIds: ['recipe-1'], createdBy: 'test' });
      const s = settings({ on: 0 });
      await apply(db.pool, 'recipe-1', [obs(0, [finding('chamber_cold', 'alarm')])], s);
      const sentAt = new Date();
      expect((await deliverDueWebhooks(db.pool, sentAt, s)).delivered).toBe(1);
      const [d] = got;
      const now = sentAt.getTime() + 1000;
      expect(verify(d.headers, d.body, secret, now)).toBe(true);
      expect(verify(d.headers, d.body, 'another-secret-000000', now)).toBe(false);
      expect(verify(d.headers, Buffer.concat([d.body, Buffer.from(' ')]), secret, now)).toBe(false);
      expect(verify({ ...d.headers, 'x-cansight-timestamp': new Date(sentAt.getTime() + 1).toISOString() }, d.body, secret, now)).toBe(false);
      expect(verify(d.headers, d.body, secret, sentAt.getTime() + 6 * 60_000)).toBe(false);
    } finally {
      await new Promise<void>((r) => server.close(() => r()));
    }
  });
});
