/**
 * Two ways to send a request to a test app, with one reply shape: through app.inject (no
 * socket, Fastify's own test door) or over a real loopback socket with undici, as a client
 * would. Error tests run both, because some failures only show on a socket (a body read to the
 * end, a connection closed after a refusal, a reply written while the client still sends).
 */
import type { AddressInfo } from 'node:net';
import type { FastifyInstance } from 'fastify';
import { Agent, request } from 'undici';

export type Transport = 'inject' | 'socket';
export const TRANSPORTS: Transport[] = ['inject', 'socket'];

export interface SendOptions {
  method?: string;
  url: string;
  headers?: Record<string, string>;
  /** An object is sent as JSON (content-type application/json unless given); text as it is. */
  payload?: string | Buffer | object;
}

export interface Reply {
  statusCode: number;
  headers: Record<string, string | string[] | undefined>;
  body: string;
  json(): any; // eslint-disable-line @typescript-eslint/no-explicit-any
}

export type Send = (o: SendOptions) => Promise<Reply>;

function encode(o: SendOptions): { headers: Record<string, string>; body: string | Buffer | undefined } {
  const headers = { ...(o.headers ?? {}) };
  if (o.payload === undefined) return { headers, body: undefined };
  if (typeof o.payload === 'string' || Buffer.isBuffer(o.payload)) return { headers, body: o.payload };
  if (!Object.keys(headers).some((h) => h.toLowerCase() === 'content-type')) headers['content-type'] = 'application/json';
  return { headers, body: JSON.stringify(o.payload) };
}

const reply = (statusCode: number, headers: Reply['headers'], body: string): Reply => ({
  statusCode,
  headers,
  body,
  json: () => JSON.parse(body),
});

export function injectSender(app: FastifyInstance): Send {
  return async (o) => {
    const { headers, body } = encode(o);
    const res = await app.inject({ method: (o.method ?? 'GET') as 'GET', url: o.url, headers, payload: body });
    return reply(res.statusCode, res.headers as Reply['headers'], res.body);
  };
}

/**
 * Listens on a free loopback port (once per app) and sends with undici, one connection per
 * request so that a refusal that closes its connection cannot affect the next request.
 */
export async function socketSender(app: FastifyInstance): Promise<{ send: Send; origin: string; close(): Promise<void> }> {
  if (!app.server.listening) await app.listen({ host: '127.0.0.1', port: 0 });
  const origin = `http://127.0.0.1:${(app.server.address() as AddressInfo).port}`;
  const agent = new Agent({ pipelining: 0, keepAliveTimeout: 1 });
  const send: Send = async (o) => {
    const { headers, body } = encode(o);
    const res = await request(origin + o.url, { method: (o.method ?? 'GET') as 'GET', headers, body, dispatcher: agent });
    return reply(res.statusCode, res.headers, await res.body.text());
  };
  return { send, origin, close: () => agent.close() };
}

/**
 * Starts a POST on a real socket that a test writes to and may cut off (`destroy()`), as a
 * client that goes away mid-body does. Errors of the cut connection are ignored.
 */
export async function openPost(app: FastifyInstance, path: string, headers: Record<string, string>): Promise<import('node:http').ClientRequest> {
  if (!app.server.listening) await app.listen({ host: '127.0.0.1', port: 0 });
  const port = (app.server.address() as AddressInfo).port;
  const { request: httpRequest } = await import('node:http');
  const req = httpRequest({ host: '127.0.0.1', port, method: 'POST', path, headers });
  req.on('error', () => undefined);
  return req;
}
