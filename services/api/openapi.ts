/**
 * What the API adds to the OpenAPI document beyond its route schemas: the examples recorded
 * from an invented scenario by `npm run docs:examples` into openapi-examples.json (see
 * test/docs/examples.test.ts; they cover the ingest routes too), which addresses POST
 * /v1/webhooks takes, and the webhook contract (OpenAPI 3.1 `webhooks`): the body Cansight
 * POSTs, its headers, and how a receiver checks the signature.
 */
import { readFileSync } from 'node:fs';
import { Type } from 'typebox';
import { SIGNATURE_HEADER, TIMESTAMP_HEADER } from '../db/webhooks.ts';
import type { OpenApiExtras, RecordedExample } from '../http/openapi.ts';
import { AlertActionSchema, AlertReply, GradeSchema } from './routes/alerts.ts';

/** What POST /v1/webhooks accepts as a target, in the words the docs and its refusals use. */
export const WEBHOOK_TARGET_RULES = [
  'an absolute http:// or https:// URL (https is strongly advised: the body describes your plant);',
  'no user name or password in the URL: the signature authenticates Cansight to the receiver;',
  'a public address: a host that is, or resolves to, a loopback, private (RFC 1918), shared, link-local, unique-local, multicast, unspecified or reserved address is refused (422), at subscription and again at every delivery, unless CANSIGHT_WEBHOOK_ALLOW_HOSTS allows it; redirects are not followed;',
  'the receiver must answer 2xx within CANSIGHT_WEBHOOK_TIMEOUT_MS (10 s by default); any other answer, a redirect or no answer is retried with back-off, up to CANSIGHT_WEBHOOK_MAX_TRIES times.',
];

/** The body of every webhook delivery (built by webhookBody in services/db/webhooks.ts). */
export const WebhookEvent = Type.Object(
  {
    eventId: Type.String({ description: 'unique per event; the same on every retry of it: drop events already seen' }),
    event: AlertActionSchema,
    sequence: Type.String({ description: "position in the alert's history; increases with every change of that alert" }),
    occurredAt: Type.String({ format: 'date-time', description: 'ring time for changes made by the rules, wall-clock time for people\'s actions' }),
    unitId: Type.String(),
    grade: GradeSchema,
    fromGrade: Type.Union([GradeSchema, Type.Null()], { description: 'the grade before this change, when it changed' }),
    alert: AlertReply,
    caution: Type.String(),
  },
  { additionalProperties: false },
);

const WEBHOOK_DESCRIPTION = `Cansight POSTs one JSON body per alert change to each subscription (POST /v1/webhooks) whose minimum grade is met by the new or the previous grade, and whose unit list (if any) holds the unit. Deliveries are at least once: retried with exponential back-off and full jitter until the receiver answers 2xx, then logged (GET /v1/webhooks/{id}/deliveries). Deduplicate on eventId; order one alert's events by sequence.

Headers:
- \`content-type: application/json\`
- \`${SIGNATURE_HEADER}: sha256=<hex>\` — HMAC-SHA256, keyed with the subscription's secret (UTF-8), of the timestamp header's value, a full stop and the raw body bytes, in lower-case hex;
- \`${TIMESTAMP_HEADER}\` — when this attempt was sent (RFC 3339), covered by the signature;
- \`x-cansight-event\` — the event (raised, escalated, returned_to_normal, acknowledged, …);
- \`x-cansight-delivery\` — the delivery id, the same on every retry;
- \`x-cansight-attempt\` — 1 for the first try, then 2, 3, …;
- \`user-agent: cansight-webhook/1\`.

Checking the signature: read the body as bytes before parsing it; compute HMAC-SHA256(key = secret, message = timestamp header + "." + body), hex-encode it, prefix "sha256=", and compare with the signature header in constant time (crypto.timingSafeEqual in Node, hmac.compare_digest in Python). Refuse the delivery when they differ, and when the timestamp is further than your replay window (e.g. 5 minutes) from your clock; a retry carries a new timestamp and a new signature, so the window does not refuse retries. Deduplicate on eventId within the window. A worked check of the primitive (RFC 4231, test case 2): key "Jefe", message "what do ya want for nothing?" gives 5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843; SECURITY.md has a complete example.

Addresses that may be subscribed:
${WEBHOOK_TARGET_RULES.map((r) => `- ${r}`).join('\n')}

Caution: an alert is advice. The turbine's own control and protection system and the site's procedures govern; a receiver must not act on the turbine from a webhook.`;

/** The recorded examples, by "METHOD /route/:param" (empty when the file is missing). */
export function loadExamples(): Record<string, RecordedExample> {
  try {
    return JSON.parse(readFileSync(new URL('./openapi-examples.json', import.meta.url), 'utf8')).examples;
  } catch {
    return {};
  }
}

/** The examples, the note of POST /v1/webhooks and the webhook contract, for the document. */
export function apiDocument(): OpenApiExtras {
  const examples = loadExamples();
  return {
    examples,
    notes: {
      'POST /v1/webhooks': `Addresses that may be subscribed:\n${WEBHOOK_TARGET_RULES.map((r) => `- ${r}`).join('\n')}\n\nWhat is sent to them: see the webhook "alertChange" in this document.`,
    },
    webhooks: {
      alertChange: {
        post: {
          summary: 'An alert changed (raised, escalated, returned to normal, acknowledged, shelved…)',
          description: WEBHOOK_DESCRIPTION,
          parameters: [
            { name: SIGNATURE_HEADER, in: 'header', required: true, schema: { type: 'string', pattern: '^sha256=[0-9a-f]{64}$' }, description: 'sha256= and the hex HMAC-SHA256, keyed with the subscription secret, of the timestamp header, "." and the raw body' },
            { name: TIMESTAMP_HEADER, in: 'header', required: true, schema: { type: 'string', format: 'date-time' } },
            { name: 'x-cansight-event', in: 'header', required: true, schema: { type: 'string' } },
            { name: 'x-cansight-delivery', in: 'header', required: true, schema: { type: 'string' } },
            { name: 'x-cansight-attempt', in: 'header', required: true, schema: { type: 'integer', minimum: 1 } },
          ],
          requestBody: { required: true, content: { 'application/json': { schema: WebhookEvent as object, ...(examples['WEBHOOK alertChange'] ? { example: examples['WEBHOOK alertChange'].request } : {}) } } },
          responses: { '2XX': { description: 'received; any other answer is retried' } },
        },
      },
    },
  };
}
