/**
 * Alerts and webhooks repository, bound to one pool for the route handlers: the alert and
 * webhook reads, people's actions, and the subscriptions and their delivery log. The statements
 * themselves are in the files beside it, one subject each: alert-rows.ts (what an alert is as
 * stored and as sent), alert-changes.ts (writing a change), alert-rule-state.ts (what the rule
 * engine keeps between calls), alert-reads.ts, alert-actions.ts and webhooks.ts.
 */
import type pg from 'pg';
import { acknowledgeAlert, shelveAlert, unshelveAlert } from './alert-actions.ts';
import { getAlert, getAlertRow, listActiveAlerts, listAlerts, type AlertFilter } from './alert-reads.ts';
import { createWebhook, deleteWebhook, getWebhook, listDeliveries, listWebhooks } from './webhooks.ts';

/** Bound to one pool, for route handlers. */
export function createAlertsRepository(pool: pg.Pool) {
  return {
    list: (f: AlertFilter) => listAlerts(pool, f),
    get: (id: string) => getAlert(pool, id),
    getRow: (id: string) => getAlertRow(pool, id),
    listActive: (unitId: string, opts?: { includeShelved?: boolean; now?: Date }) => listActiveAlerts(pool, unitId, opts),
    acknowledge: (id: string, p: Parameters<typeof acknowledgeAlert>[2]) => acknowledgeAlert(pool, id, p),
    shelve: (id: string, p: Parameters<typeof shelveAlert>[2]) => shelveAlert(pool, id, p),
    unshelve: (id: string, p: Parameters<typeof unshelveAlert>[2]) => unshelveAlert(pool, id, p),
    createWebhook: (w: Parameters<typeof createWebhook>[1]) => createWebhook(pool, w),
    listWebhooks: () => listWebhooks(pool),
    getWebhook: (id: string) => getWebhook(pool, id),
    deleteWebhook: (id: string) => deleteWebhook(pool, id),
    listDeliveries: (webhookId: string, p: { afterId?: string; limit: number }) => listDeliveries(pool, webhookId, p),
  };
}

export type AlertsRepository = ReturnType<typeof createAlertsRepository>;
