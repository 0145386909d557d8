/**
 * The dashboard: GET / serves a small HTML shell (public: it holds no data), and the browser
 * code under /dashboard/ is compiled from services/api/dashboard/*.ts with esbuild on first
 * request and kept in memory, so `npm start` needs no build step. The page fetches every
 * figure from the /v1 API with a key the person pastes. GET /v1/whoami tells the page what the
 * pasted key may do (a viewer sees; an operator also acknowledges and shelves).
 */
import { readFile } from 'node:fs/promises';
import { fileURLToPath } from 'node:url';
import path from 'node:path';
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { ErrorReply } from '../../http/schemas.ts';
import { ADVISORY_CAUTION } from '../../core/findings.ts';
import { REVIEW_STYLE_HASH } from '../review/html.ts';

const HERE = path.dirname(fileURLToPath(import.meta.url));
const SOURCE = path.join(HERE, '..', 'dashboard');

/**
 * The page's Content-Security-Policy: scripts, styles and data from this server only; no
 * inline script or style (except the printable review's own style sheet, by its hash: the
 * review opens from the page as a blob and inherits this policy), no framing, no form posts.
 */
export const DASHBOARD_CSP =
  `default-src 'none'; script-src 'self'; style-src 'self' ${REVIEW_STYLE_HASH}; img-src 'self' data: blob:; connect-src 'self'; font-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'`;

interface Asset {
  body: string;
  etag: string;
}

let bundle: Promise<Asset> | null = null;
let styles: Promise<Asset> | null = null;

function etagOf(text: string): string {
  let h = 2166136261;
  for (let i = 0; i < text.length; i++) h = Math.imul(h ^ text.charCodeAt(i), 16777619);
  return `"${(h >>> 0).toString(16)}-${text.length.toString(16)}"`;
}

/** Compiles the browser code once per process (concurrent first requests share the build). */
export function dashboardScript(): Promise<Asset> {
  if (!bundle) {
    bundle = (async () => {
      const esbuild = await import('esbuild');
      const result = await esbuild.build({
        entryPoints: [path.join(SOURCE, 'main.ts')],
        bundle: true,
        write: false,
        format: 'iife',
        target: ['es2020'],
        minify: true,
        sourcemap: false,
        legalComments: 'none',
        logLevel: 'silent',
      });
      const body = result.outputFiles[0].text;
      return { body, etag: etagOf(body) };
    })();
    bundle.catch(() => {
      bundle = null;
    });
  }
  return bundle;
}

function dashboardStyles(): Promise<Asset> {
  if (!styles) {
    styles = readFile(path.join(SOURCE, 'style.css'), 'utf8').then((body) => ({ body, etag: etagOf(body) }));
    styles.catch(() => {
      styles = null;
    });
  }
  return styles;
}

function shell(): string {
  const caution = ADVISORY_CAUTION.replace(/&/g, '&amp;').replace(/</g, '&lt;');
  return `<!doctype html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Cansight · exhaust-ring monitoring</title>
<link rel="icon" href="data:,">
<link rel="stylesheet" href="/dashboard/app.css">
<script defer src="/dashboard/app.js"></script>
</head>
<body>
<header class="topbar">
  <a class="brand" href="#/">Cansight</a>
  <span class="tagline">exhaust spread, chambers and thermocouples across the fleet</span>
  <form id="key-form" class="keyform" autocomplete="off">
    <label for="key-input">API key</label>
    <input id="key-input" type="password" placeholder="paste a viewer or operator key" spellcheck="false">
    <button type="submit">Use key</button>
  </form>
  <span id="who" class="who" hidden></span>
  <button id="forget-key" type="button" class="quiet" hidden>Forget key</button>
</header>
<nav id="crumbs" class="crumbs" aria-label="where you are"></nav>
<main id="view" tabindex="-1"><p class="hint">Loading…</p></main>
<footer class="caution" role="note"><strong>Caution.</strong> ${caution} Cansight's findings are advice for people who know the machine; check them against the control system's own readings before acting.</footer>
<noscript><p class="hint">This page needs JavaScript. The same figures are available from the API: see <a href="/docs">/docs</a>.</p></noscript>
</body>
</html>`;
}

export async function dashboardRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const page = shell();

  app.get('/', { schema: { hide: true }, config: { access: 'public' } }, async (_request, reply) => {
    return reply
      .header('content-type', 'text/html; charset=utf-8')
      .header('content-security-policy', DASHBOARD_CSP)
      .header('cache-control', 'no-cache')
      .send(page);
  });

  app.get('/dashboard/app.js', { schema: { hide: true }, config: { access: 'public' } }, async (request, reply) => {
    const a = await dashboardScript();
    reply.header('etag', a.etag).header('cache-control', 'no-cache');
    if (request.headers['if-none-match'] === a.etag) return reply.status(304).send();
    return reply.header('content-type', 'text/javascript; charset=utf-8').send(a.body);
  });

  app.get('/dashboard/app.css', { schema: { hide: true }, config: { access: 'public' } }, async (request, reply) => {
    const a = await dashboardStyles();
    reply.header('etag', a.etag).header('cache-control', 'no-cache');
    if (request.headers['if-none-match'] === a.etag) return reply.status(304).send();
    return reply.header('content-type', 'text/css; charset=utf-8').send(a.body);
  });

  app.get('/v1/whoami', {
    schema: {
      tags: ['dashboard'],
      summary: 'What the calling key may do: its role and unit scope',
      response: {
        200: Type.Object({
          role: Type.String(),
          keyId: Type.String({ description: 'the id the key is shown by ("key-" and 12 hex digits of its hash; never part of the key)' }),
          units: Type.Union([Type.Array(Type.String()), Type.Null()], { description: 'null: every unit' }),
          canAct: Type.Boolean({ description: 'may acknowledge and shelve alerts' }),
        }),
        401: ErrorReply,
        403: ErrorReply,
      },
    },
    config: { access: 'read' },
  }, async (request) => {
    const k = request.principal!;
    return { role: k.role, keyId: k.keyId, units: k.unitIds, canAct: k.role === 'operator' || k.role === 'admin' };
  });
}
