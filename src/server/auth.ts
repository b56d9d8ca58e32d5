/**
 * Tokens: a command token (bearer) for the controls, an optional viewer token for watching when
 * the server is reachable beyond this machine. Both are compared in constant time: each side is
 * hashed to 32 bytes first, so `timingSafeEqual` always compares equal-length buffers and the
 * time taken says nothing about the token's length or content.
 */
import { createHash, randomBytes, timingSafeEqual } from 'node:crypto';
import type { IncomingHttpHeaders } from 'node:http';

/** A fresh token: 24 random bytes, base64url (32 characters). */
export function generateToken(): string {
  return randomBytes(24).toString('base64url');
}

const digest = (text: string): Buffer => createHash('sha256').update(text, 'utf8').digest();

/** Whether `given` equals `expected`, in time independent of both. */
export function tokensMatch(given: string | undefined, expected: string): boolean {
  const a = digest(given ?? '');
  const b = digest(expected);
  // Evaluate the comparison whatever `given` was, then refuse an empty one.
  const same = timingSafeEqual(a, b);
  return same && given !== undefined && given.length > 0;
}

/** The token of an `Authorization: Bearer …` header, if any. */
export function bearerToken(headers: IncomingHttpHeaders): string | undefined {
  const value = headers.authorization;
  if (typeof value !== 'string') return undefined;
  const match = /^Bearer\s+(\S+)\s*$/i.exec(value);
  return match?.[1];
}

/** Header that carries the viewer token (a query parameter `viewer` works too, for WebSockets). */
export const VIEWER_HEADER = 'x-fringe-viewer';

/** Whether a request may view: no viewer token configured, or the right viewer or command token given. */
export function mayView(
  config: { viewerToken?: string | undefined; token: string },
  headers: IncomingHttpHeaders,
  query: URLSearchParams,
): boolean {
  if (config.viewerToken === undefined) return true;
  const header = headers[VIEWER_HEADER];
  const given = typeof header === 'string' ? header : (query.get('viewer') ?? undefined);
  if (tokensMatch(given, config.viewerToken)) return true;
  return tokensMatch(bearerToken(headers), config.token);
}

/** Whether `host` binds only this machine. */
export function isLoopback(host: string): boolean {
  return host === '127.0.0.1' || host === '::1' || host === 'localhost' || /^127\.\d+\.\d+\.\d+$/.test(host);
}

/** The URL with any `viewer=` value masked, for logs. */
export function redactUrl(url: string): string {
  return url.replace(/([?&]viewer=)[^&#]*/gi, '$1[redacted]');
}
