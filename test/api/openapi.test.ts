/**
 * The OpenAPI document is enough to work from: every field a client sends is described, every
 * operation says who may call it and carries an example request (when it takes a body) and an
 * example reply, every example is valid against its own schema (checked with Ajv, as the server
 * validates), and the webhook contract is in it. The signature recipe is checked against the
 * published HMAC-SHA256 test vector of RFC 4231 (test case 2) with Node's crypto, and against a
 * delivery body made by the code that sends them.
 */
import { createHmac } from 'node:crypto';
import { Ajv2020 } from 'ajv/dist/2020.js';
import addFormats from 'ajv-formats';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createTestApp, type TestApp } from '../helpers/app.ts';
import { signBody } from '../../services/db/webhooks.ts';
import { plumeAngleDeg, swirlDeg } from '../../services/core/index.ts';

let t: TestApp;
// eslint-disable-next-line @typescript-eslint/no-explicit-any
let doc: any;
beforeAll(async () => {
  t = await createTestApp();
  doc = (await t.send({ url: '/openapi.json' })).json();
});
afterAll(async () => t?.close());

type Schema = Record<string, unknown>;
const METHODS = ['get', 'post', 'put', 'patch', 'delete'];
const operations = () =>
  Object.entries(doc.paths as Record<string, Record<string, Schema>>).flatMap(([path, ops]) =>
    Object.entries(ops)
      .filter(([m]) => METHODS.includes(m))
      .map(([m, op]) => ({ name: `${m.toUpperCase()} ${path}`, op: op as Schema & { requestBody?: { content: Record<string, Schema> }; responses: Record<string, { content?: Record<string, Schema> }>; parameters?: Schema[] } })),
  );

/** Paths (a.b.c) of the properties in a schema that have no description of their own. */
function undescribed(schema: Schema | undefined, at = ''): string[] {
  if (!schema || typeof schema !== 'object') return [];
  const out: string[] = [];
  const props = schema.properties as Record<string, Schema> | undefined;
  for (const [k, v] of Object.entries(props ?? {})) {
    const here = at ? `${at}.${k}` : k;
    const inner = (v.anyOf as Schema[] | undefined)?.find((x) => x.type !== 'null');
    if (!v.description && !inner?.description) out.push(here);
    out.push(...undescribed(v, here));
    if (v.items && typeof v.items === 'object' && !Array.isArray(v.items)) out.push(...undescribed(v.items as Schema, `${here}[]`));
  }
  return out;
}

const ajv = new Ajv2020({ strict: false, allErrors: true });
addFormats.default(ajv);

describe('the OpenAPI document', () => {
  it('is OpenAPI 3.1 with every operation and the webhook contract', () => {
    expect(doc.openapi).toBe('3.1.0');
    expect(operations().length).toBeGreaterThan(30);
    const hook = doc.webhooks.alertChange.post;
    expect(hook.description).toContain('of the timestamp header\'s value, a full stop and the raw body bytes');
    expect(hook.parameters.map((p: Schema) => p.name)).toEqual(expect.arrayContaining(['x-cansight-signature', 'x-cansight-timestamp', 'x-cansight-delivery']));
    expect(hook.requestBody.content['application/json'].schema.properties.alert).toBeTruthy();
  });

  it('describes every field a client sends: bodies and query, path and header parameters', () => {
    const missing: string[] = [];
    for (const { name, op } of operations()) {
      for (const media of Object.values(op.requestBody?.content ?? {})) missing.push(...undescribed(media.schema as Schema).map((f) => `${name} body ${f}`));
      for (const p of op.parameters ?? []) if (!p.description && !(p.schema as Schema)?.description) missing.push(`${name} ${p.in} ${p.name}`);
    }
    expect(missing).toEqual([]);
  });

  it('says who may call each operation, in words and as x-roles', () => {
    for (const { name, op } of operations()) {
      expect(op.description, name).toMatch(/Who may call: a key with role|Anyone: no key is needed/);
      expect(Array.isArray(op['x-roles']), name).toBe(true);
    }
    const byName = Object.fromEntries(operations().map((o) => [o.name, o.op]));
    expect(byName['POST /v1/units']['x-roles']).toEqual(['admin']);
    expect(byName['POST /v1/alerts/{id}/ack']['x-roles']).toEqual(['operator', 'admin']);
    expect(byName['POST /v1/units/{unitId}/rings']['x-roles']).toEqual(['ingest', 'admin']);
    expect(byName['GET /health']['x-roles']).toEqual([]);
    expect(byName['POST /v1/webhooks'].description).toContain('Addresses that may be subscribed');
  });

  it('carries an example request for every body and an example reply for every operation, each valid against its schema', () => {
    const problems: string[] = [];
    for (const { name, op } of operations()) {
      for (const [type, media] of Object.entries(op.requestBody?.content ?? {})) {
        if (media.example === undefined) problems.push(`${name}: no example request (${type})`);
        else if (type === 'application/json' && !ajv.validate(media.schema as object, media.example)) problems.push(`${name}: request example invalid: ${ajv.errorsText()}`);
      }
      const ok = Object.entries(op.responses).filter(([code]) => /^2/.test(code));
      const withExample = ok.filter(([, r]) => Object.values(r.content ?? {}).some((m) => m.example !== undefined));
      if (ok.some(([code]) => code !== '204') && withExample.length === 0) problems.push(`${name}: no example reply`);
      for (const [code, r] of withExample) {
        for (const m of Object.values(r.content ?? {})) {
          if (m.example !== undefined && !ajv.validate(m.schema as object, m.example)) problems.push(`${name} ${code}: reply example invalid: ${ajv.errorsText()}`);
        }
      }
    }
    expect(problems).toEqual([]);
  });

  it('explains the swirl curve with a worked example that the mapping code agrees with', () => {
    const swirl = doc.paths['/v1/units'].post.requestBody.content['application/json'].schema.properties.swirl;
    expect(swirl.description).toMatch(/worked example/i);
    expect(swirl.properties.sense.description).toMatch(/direction/);
    // The numbers of the worked example, worked by hand in the description, against core's mapping.
    const config = { chambers: { count: 12, firstAngleDeg: 15 }, swirl: { sense: 1 as const, curve: [[0.3, 92], [0.6, 74], [1.0, 55]] as [number, number][] } };
    expect(swirl.description).toContain('= 64.5°');
    expect(swirlDeg(config.swirl.curve, 0.8)).toBeCloseTo(64.5, 9);
    expect(swirl.description).toContain('75 + 64.5 = 139.5°');
    expect(plumeAngleDeg(config, 2, 0.8)).toBeCloseTo(139.5, 9);
    expect(swirl.description).toContain('75 − 64.5 = 10.5°');
    expect(plumeAngleDeg({ ...config, swirl: { ...config.swirl, sense: -1 } }, 2, 0.8)).toBeCloseTo(10.5, 9);
  });
});

describe('the webhook signature recipe', () => {
  it('is HMAC-SHA256 in lower-case hex: RFC 4231 test case 2 as the document states it', () => {
    // RFC 4231 §4.3: key "Jefe", data "what do ya want for nothing?".
    const expected = '5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843';
    expect(createHmac('sha256', 'Jefe').update('what do ya want for nothing?').digest('hex')).toBe(expected);
    // What is signed is "<timestamp>.<body>": the same primitive over the joined text.
    const ts = '2026-01-01T00:00:00.000Z';
    expect(signBody('Jefe', ts, 'what do ya want for nothing?')).toBe('sha256=' + createHmac('sha256', 'Jefe').update(`${ts}.what do ya want for nothing?`).digest('hex'));
    expect(doc.webhooks.alertChange.post.description).toContain(expected);
  });

  it('the example delivery body in the document is valid against the webhook schema', () => {
    const media = doc.webhooks.alertChange.post.requestBody.content['application/json'];
    expect(media.example).toBeTruthy();
    expect(ajv.validate(media.schema, media.example), ajv.errorsText()).toBe(true);
  });
});
