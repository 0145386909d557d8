/**
 * GET /v1/units/:unitId/review?from&to: the pre-outage review of one unit (services/api/review)
 * as a printable HTML page, or CSV (?format=csv or Accept: text/csv). `cansight report` writes
 * the same document to a file.
 */
import type { FastifyInstance } from 'fastify';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from 'typebox';
import { REVIEW_DEFAULT_DAYS, REVIEW_MAX_DAYS, reviewData } from '../review/data.ts';
import { reviewHtml } from '../review/html.ts';
import { reviewCsv } from '../review/csv.ts';
import { UnitId } from '../schemas.ts';
import { WINDOW_HEADER, Window, readErrors, readsOf, unitOr404, type WindowEnd } from './read-common.ts';

export async function reviewRoutes(base: FastifyInstance): Promise<void> {
  const app = base.withTypeProvider<TypeBoxTypeProvider>();
  const reads = readsOf(app);

  app.get('/v1/units/:unitId/review', {
    schema: {
      tags: ['read'],
      summary: 'Pre-outage review: chambers ranked by evidence, thermocouples to replace, swirl fit, alerts and cautions (printable HTML, or CSV)',
      description: `Default window: the ${REVIEW_DEFAULT_DAYS} days up to the latest analysed ring; at most ${REVIEW_MAX_DAYS} days. CSV with ?format=csv or Accept: text/csv.`,
      produces: ['text/html', 'text/csv'],
      params: Type.Object({ unitId: UnitId }),
      querystring: Type.Object({ ...Window, format: Type.Optional(Type.Union([Type.Literal('html'), Type.Literal('csv')], { description: 'html (a printable page, the default) or csv (one row per chamber and thermocouple)' })) }, { additionalProperties: false }),
      response: { 200: Type.String({ description: 'HTML page or CSV' }), ...readErrors },
    },
    config: { access: 'read' },
  }, async (request, reply) => {
    const unit = await unitOr404(app, request.params.unitId);
    const accept = String(request.headers.accept ?? '');
    const csv = request.query.format === 'csv' || (request.query.format === undefined && /\btext\/csv\b/.test(accept) && !/\btext\/html\b/.test(accept));
    const d = await reviewData(reads, unit, request.query, Date.now(), app.appConfig.worker);
    const endsAt: WindowEnd = request.query.to ? 'request' : d.latestTs ? 'last-ring' : 'clock';
    reply.header(WINDOW_HEADER, `from=${d.from}; to=${d.to}; ends-at=${endsAt}`);
    if (csv) {
      return reply
        .header('content-type', 'text/csv; charset=utf-8')
        .header('content-disposition', `attachment; filename="cansight-review-${unit.id}-${d.to.slice(0, 10)}.csv"`)
        .send(reviewCsv(d));
    }
    return reply.header('content-type', 'text/html; charset=utf-8').send(reviewHtml(d));
  });
}
