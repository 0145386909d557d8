/**
 * The byte reader of rings against the general way (JSON.parse, then validateRing): whatever
 * the reader takes, the general way accepts with the same ring to the bit; the common forms are
 * taken by the reader; and the batch scanner accepts only bodies JSON.parse reads as
 * { rings: [...] }, with each ring's span parsing to that ring.
 */
import { describe, expect, it } from 'vitest';
import { loadConfig } from '../../services/db/config.ts';
import { RingCopyEncoder, type RingRow } from '../../services/db/rings.ts';
import { RingBytesReader, readRingBatch } from '../../services/ingest/ring-bytes.ts';
import { isRejection, validateRing, type ValidationContext } from '../../services/ingest/validate.ts';

const NOW = Date.UTC(2026, 2, 1, 12, 0, 0);
const bounds = loadConfig({}).ingest.bounds;
const UNIT = 'ridge-2';
const ctx = (count = 4, futureToleranceS = 300): ValidationContext => ({ nowMs: NOW, futureToleranceS, bounds, thermocoupleCount: () => count });

/** Seeded PRNG (Park–Miller), so a failure can be reproduced. */
function prng(seed: number): () => number {
  let s = seed;
  return () => (s = (s * 16807) % 2147483647) / 2147483647;
}

const bits = (row: RingRow) => {
  const e = new RingCopyEncoder(64);
  e.add(row);
  return e.finish().toString('hex');
};

interface Outcome {
  fast: RingRow | null;
  general: RingRow | null;
}

/** Both ways on one ring text. */
function both(text: string, c = ctx()): Outcome {
  const reader = new RingBytesReader();
  const buf = Buffer.from(`  ${text} `, 'utf8');
  const taken = reader.read(buf, 1, buf.length) && (!reader.namesUnit || reader.unitId() === UNIT) && reader.check(UNIT, c);
  let general: RingRow | null = null;
  try {
    const v = validateRing(JSON.parse(text), UNIT, c);
    general = isRejection(v) ? null : v;
  } catch {
    general = null;
  }
  return { fast: taken ? { ...reader.row, exhaustC: Float64Array.from(reader.row.exhaustC) } : null, general };
}

function expectSame(text: string, c = ctx()): Outcome {
  const o = both(text, c);
  if (o.fast !== null) {
    expect(o.general, `the reader took what the general way refuses: ${text}`).not.toBeNull();
    const g = o.general!;
    expect({ ...o.fast, exhaustC: Array.from(o.fast.exhaustC) }, text).toEqual({ ...g, exhaustC: Array.from(g.exhaustC) });
    expect(Object.is(o.fast.loadMw, g.loadMw)).toBe(true);
    expect(bits(o.fast), text).toBe(bits(g));
  }
  return o;
}

const base = '"ts":"2026-03-01T10:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100';

describe('the byte reader', () => {
  it('takes the common forms, with the ring validateRing returns', () => {
    const taken = [
      `{${base},"exhaustC":[551.2,549.8,null,560]}`,
      `{"unitId":"${UNIT}",${base},"exhaustC":[551.25,549.8,null,560]}`,
      `{ "exhaustC" : [ 551 , 549.5 , 550 , -0.5 ] , ${base} , "cdtC" : null , "cdpKPa":1200.5,"fuelFlowKgS":1.25,"flameDetected":true }`,
      `{${base},"flameDetected":false,"exhaustF":[1022,1023.8,null,1040]}`,
      `{"ts":"2026-03-01t10:00:00.123456789z","loadMw":-0,"ambientC":-12.5,"ambientKPa":1.009e2,"speedPct":100.0,"exhaustC":[1E2,2e+2,3.5e-1,0]}`,
      `{"ts":"2026-03-01 10:00:00.5+05:30","loadMw":0.1,"ambientC":0.30000000000000004,"ambientKPa":100.90000000000000568,"speedPct":99.99999999999999,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2024-02-29T23:59:59.999-11:45","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"1970-01-01T00:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[null,null,null,null]}`,
    ];
    for (const text of taken) {
      const o = expectSame(text);
      expect(o.fast, text).not.toBeNull();
    }
  });

  it('leaves to the general way every ring it does not take, and never takes one the general way refuses', () => {
    const others = [
      `{${base},"exhaustC":[551.2,549.8,null]}`, // wrong count
      `{${base},"exhaustC":[551.2,549.8,null,"560"]}`,
      `{${base},"exhaustC":[551.2,549.8,null,-300]}`,
      `{${base},"exhaustC":[551.2,549.8,null,1e999]}`,
      `{${base},"exhaustC":null,"exhaustF":[1022,1023.8,null,1040]}`, // taken by the general way only
      `{${base},"exhaustC":[551,552,553,554],"exhaustF":[1022,1023.8,null,1040]}`,
      `{${base},"exhaustMv":[22,22,22,22],"coldJunctionC":25}`,
      `{${base},"exhaustC":[551,552,553,554],"coldJunctionC":null}`,
      `{${base},"exhaustC":[551,552,553,554],"coldJunctionC":20}`,
      `{${base},"exhaustC":[551,552,553,554],"loadMw":22}`, // a key twice: JSON.parse keeps the last
      `{${base},"exhaustC":[551,552,553,554],"extra":1}`,
      `{${base},"exhaustC":[551,552,553,554],"__proto__":{}}`,
      `{"unitId":"other-1",${base},"exhaustC":[551,552,553,554]}`,
      `{"unitId":null,${base},"exhaustC":[551,552,553,554]}`,
      `{"unitId":"Ridge-2",${base},"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00Z","loadMw":"21.4","ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00Z","loadMw":null,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00Z","ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00Z","loadMw":5000,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"fuelFlowKgS":-1,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"flameDetected":1,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-02-29T10:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T24:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:60Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00+24:00","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00.1234567890Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T12:06:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`, // in the future
      `{"ts":"1969-12-31T23:59:59.999Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"0099-03-01T10:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{"ts":"2026-03-01T10:00:00\\u005a","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`, // an escape: general way
      `{"ts":1767225600000,"loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[551,552,553,554]}`,
      `{${base},"exhaustC":[551,552,553,01]}`,
      `{${base},"exhaustC":[551,552,553,1.]}`,
      `{${base},"exhaustC":[551,552,553,.5]}`,
      `{${base},"exhaustC":[551,552,553,+5]}`,
      `{${base},"exhaustC":[551,552,553,5,]}`,
      `{${base},"exhaustC":[551,552,553,5]`,
      `{${base},"exhaustC":[551,552,553,5]}}`,
      `{${base},"exhaustC":[551,552,553,5]} x`,
      `{${base},"exhaustC":[551,552,553,nul]}`,
      `{${base},"exhaustC":[[551],552,553,5]}`,
      `[{${base},"exhaustC":[551,552,553,5]}]`,
      `{}`,
      ``,
    ];
    for (const text of others) {
      const o = expectSame(text);
      expect(o.fast, text).toBeNull();
    }
  });

  it('agrees with the general way on thousands of random rings and their mutations', () => {
    const rnd = prng(20260301);
    const pick = <T,>(xs: T[]) => xs[Math.floor(rnd() * xs.length)];
    /** A number as text, mostly inside [lo, hi], written in the many ways JSON allows. */
    const num = (lo: number, hi: number): string => {
      const v = lo - (hi - lo) * 0.05 + rnd() * (hi - lo) * 1.1;
      return pick([
        () => String(Math.round(v * 100) / 100),
        () => String(v),
        () => v.toExponential(Math.floor(rnd() * 12)),
        () => String(Math.round(v)),
        () => (v < 0 ? '-' : '') + '0.' + '0'.repeat(Math.floor(rnd() * 3)) + String(Math.floor(rnd() * 1e6)),
        () => String(Math.trunc(v)) + '.' + String(Math.floor(rnd() * 1e12)).padStart(12, '0'),
        () => v.toFixed(20),
        () => '-0',
        () => 'null',
      ])();
    };
    const time = (): string => {
      const ms = Date.UTC(2025, 0, 1) + Math.floor(rnd() * 370 * 86_400_000);
      const iso = new Date(ms).toISOString();
      return pick([
        () => iso,
        () => iso.replace('.000Z', 'Z').replace(/\.\d+Z/, 'Z'),
        () => iso.slice(0, 19) + '.' + String(Math.floor(rnd() * 1e9)).padStart(9, '0') + 'Z',
        () => iso.slice(0, 19) + (rnd() < 0.5 ? '+' : '-') + String(Math.floor(rnd() * 14)).padStart(2, '0') + ':' + pick(['00', '30', '45']),
        () => iso.replace('T', ' ').toLowerCase(),
      ])();
    };
    const mutate = (text: string): string => {
      const i = Math.floor(rnd() * text.length);
      return pick([
        () => text.slice(0, i) + text.slice(i + 1),
        () => text.slice(0, i) + pick(['"', ',', ':', '1', '.', 'e', '-', ' ', '}', ']', '\\', 'x', 'é']) + text.slice(i),
        () => text.slice(0, i) + text.slice(i, i + 1).repeat(2) + text.slice(i + 1),
      ])();
    };
    let fast = 0;
    let general = 0;
    for (let n = 0; n < 6000; n++) {
      const tc = 1 + Math.floor(rnd() * 6);
      const fields = [
        `"ts":"${time()}"`,
        `"loadMw":${num(-100, 2000)}`,
        `"ambientC":${num(-70, 70)}`,
        `"ambientKPa":${num(50, 110)}`,
        `"speedPct":${num(0, 130)}`,
        rnd() < 0.8 ? `"exhaustC":[${Array.from({ length: tc }, () => num(-273.15, 1800)).join(',')}]` : `"exhaustF":[${Array.from({ length: tc }, () => num(-459.67, 3272)).join(',')}]`,
      ];
      if (rnd() < 0.3) fields.push(`"unitId":"${rnd() < 0.9 ? UNIT : 'other'}"`);
      if (rnd() < 0.3) fields.push(`"cdtC":${num(-70, 800)}`);
      if (rnd() < 0.2) fields.push(`"fuelFlowKgS":${num(0, 200)}`);
      if (rnd() < 0.3) fields.push(`"flameDetected":${pick(['true', 'false', 'null'])}`);
      fields.sort(() => rnd() - 0.5);
      let text = `{${fields.join(',')}}`;
      if (rnd() < 0.3) text = mutate(text);
      const c = ctx(rnd() < 0.9 ? tc : tc + 1, 300);
      const o = expectSame(text, { ...c, nowMs: Date.UTC(2026, 0, 1) });
      if (o.fast) fast++;
      if (o.general) general++;
    }
    // Every form made here is one the reader covers: it takes every ring the general way accepts.
    expect(fast).toBe(general);
    expect(fast).toBeGreaterThan(600);
  });
});

describe('the batch scanner', () => {
  it('cuts { "rings": [...] } into rings, each span parsing to the ring JSON.parse gives', () => {
    const rings = [
      { ts: '2026-03-01T10:00:00Z', loadMw: 21.4, exhaustC: [1, null, 'x', true], unitId: 'a' },
      {},
      { ts: 'a "quoted" \\ text é \u2028', flameDetected: false, exhaustMv: [] },
    ];
    for (const body of [JSON.stringify({ rings }), JSON.stringify({ rings }, null, 2), ' \r\n{"rings" : [ ] }\t', '{"rings":[]}']) {
      const s = readRingBatch(Buffer.from(body));
      expect(s, body).not.toBeNull();
      const parsed = JSON.parse(body).rings as unknown[];
      expect(s!.length).toBe(parsed.length);
      parsed.forEach((r, i) => expect(JSON.parse(s!.body.toString('utf8', s!.starts[i], s!.ends[i]))).toEqual(r));
    }
  });

  it('reads the rings in the common form as it passes them: each, checked, is the ring validateRing gives', () => {
    const rings = [
      `{${base},"exhaustC":[551.2,549.8,null,560]}`,
      `{${base},"exhaustC":[551.2,549.8,null]}`,
      `{"unitId":"${UNIT}",${base},"exhaustF":[1022,1023.8,null,1040],"cdtC":390,"flameDetected":true}`,
      `{${base},"exhaustC":[551,552,553,554],"loadMw":"x"}`,
      `{${base},"exhaustMv":[22,22.5,null,23],"coldJunctionC":25}`,
      `{"unitId":"other",${base},"exhaustC":[551,552,553,554]}`,
      `{ "ts" : "2026-03-01T09:00:00.25+01:00" , "loadMw" : 1e1 , "ambientC" : -0.5 , "ambientKPa" : 99 , "speedPct" : 0 , "exhaustC" : [ 1 , 2 , 3 , 4 ] }`,
      `{${base},"exhaustC":[551,552,553,5e3]}`,
    ];
    const body = Buffer.from(`{"rings":[${rings.join(',')}]}`);
    const batch = readRingBatch(body)!;
    expect(Array.from(batch.fast)).toEqual([1, 1, 1, 0, 0, 1, 1, 1]);
    const c = ctx();
    const taken: boolean[] = [];
    for (let i = 0; i < batch.length; i++) {
      const v = validateRing(JSON.parse(body.toString('utf8', batch.starts[i], batch.ends[i])), UNIT, c);
      let row: RingRow | null = null;
      if (batch.fast[i] === 1) {
        batch.reader.load(body, i);
        if ((!batch.reader.namesUnit || batch.reader.unitId() === UNIT) && batch.reader.check(UNIT, c)) row = batch.reader.row;
      }
      taken.push(row !== null);
      if (row !== null) {
        expect(isRejection(v), rings[i]).toBe(false);
        expect(bits(row)).toBe(bits(v as RingRow));
      }
    }
    expect(taken).toEqual([true, false, true, false, false, false, true, false]);
  });

  it('a batch handed back lends its reader to the next one, which reads its own rings', () => {
    const ringAt = (hour: number, reading: number) => `{"ts":"2026-03-01T0${hour}:00:00Z","loadMw":21.4,"ambientC":12.5,"ambientKPa":100.9,"speedPct":100,"exhaustC":[${reading},${reading + 1},null,${reading + 2}]}`;
    const first = readRingBatch(Buffer.from(`{"rings":[${ringAt(1, 500)},${ringAt(2, 510)},${ringAt(3, 520)}]}`))!;
    first.release();
    const mv = `{${base},"exhaustMv":[22,22.5,null,23],"coldJunctionC":25}`;
    const body = Buffer.from(`{"rings":[${mv},${ringAt(4, 600)}]}`);
    const second = readRingBatch(body)!;
    expect(second.reader).toBe(first.reader);
    expect(Array.from(second.fast)).toEqual([0, 1]);
    second.reader.load(body, 1);
    expect(second.reader.check(UNIT, ctx())).toBe(true);
    expect(bits(second.reader.row)).toBe(bits(validateRing(JSON.parse(ringAt(4, 600)), UNIT, ctx()) as RingRow));
    second.release();
  });

  it('leaves every other body to the general parser', () => {
    for (const body of [
      '', ' ', '{}', '[]', '{"rings":{}}', '{"rings":[1]}', '{"rings":[[]]}', '{"rings":[null]}', '{"rings":[],"x":1}', '{"x":1,"rings":[]}',
      '{"rings":[{"__proto__":{}}]}', '{"rings":[{"constructor":{"prototype":{}}}]}', '{"rings":[{"ts":{"a":1}}]}',
      '{"rings":[{"x":1}]}', '{"rings":[{"t\\u0073":"x"}]}', '\ufeff{"rings":[]}', '{"rings":[]', '{"rings":[]}}', '{"rings":[{}]} {}',
      '{"rings":[{"ts":"a\nb"}]}', '{"rings":[{"ts":"\\x"}]}', '{"rings":[{"loadMw":01}]}', "{'rings':[]}", '{"rings":[{},]}',
      '{"rings":[{"loadMw":1}}', '{"rings":[{"loadMw":1}', '{"rings":[{"loadMw":1} {"loadMw":2}]}', '{"rings":[{"loadMw":1}],}',
    ]) {
      expect(readRingBatch(Buffer.from(body)), body).toBeNull();
    }
  });

  it('never accepts a body JSON.parse refuses (random mutations of a batch)', () => {
    const rnd = prng(7);
    const good = JSON.stringify({ rings: [{ ts: '2026-03-01T10:00:00.5+01:00', loadMw: -1.5e-3, exhaustC: [1, null, 2.25], flameDetected: true, cdtC: null }, { unitId: 'u-1', exhaustF: [] }] });
    let accepted = 0;
    for (let n = 0; n < 20_000; n++) {
      let text = good;
      for (let m = 1 + Math.floor(rnd() * 2); m > 0; m--) {
        const i = Math.floor(rnd() * text.length);
        const c = '{}[],:"\\-+.e0 n\u0001x'[Math.floor(rnd() * 19)];
        text = rnd() < 0.5 ? text.slice(0, i) + c + text.slice(i) : text.slice(0, i) + text.slice(i + 1);
      }
      const s = readRingBatch(Buffer.from(text));
      if (s === null) continue;
      accepted++;
      const parsed = JSON.parse(text) as { rings: unknown[] }; // throws if the scanner was wrong
      expect(Object.keys(parsed)).toEqual(['rings']);
      expect(s.length).toBe(parsed.rings.length);
      parsed.rings.forEach((r, i) => expect(JSON.parse(text.slice(s.starts[i], s.ends[i]))).toEqual(r));
    }
    expect(accepted).toBeGreaterThan(100);
  });
});
