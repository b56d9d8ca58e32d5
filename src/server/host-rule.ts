/**
 * The names this server answers to. A browser sends in `Host` the name it looked up, so a page
 * of another site whose name was made to point at this machine (DNS rebinding) names its own
 * host, with an Origin to match: refusing every name but this server's own keeps such a page
 * from reading the run. Nothing here throws: text that is not a host is simply not on the list.
 */

/** A request target split without decoding: the authority of an absolute-form target (`http://host/path`), the path and the query. */
export interface RequestTarget {
  /** Present only for an absolute-form target, which then overrides the Host header (RFC 9112 §3.2.2). */
  authority: string | undefined;
  path: string;
  query: string;
}

const ABSOLUTE_FORM = /^[a-z][a-z0-9+.-]*:\/\/([^/?#]*)([^?#]*)(?:\?([^#]*))?/i;

export function splitTarget(url: string): RequestTarget {
  const absolute = ABSOLUTE_FORM.exec(url);
  if (absolute) return { authority: absolute[1] ?? '', path: absolute[2] || '/', query: absolute[3] ?? '' };
  const hash = url.indexOf('#');
  const bare = hash < 0 ? url : url.slice(0, hash);
  const mark = bare.indexOf('?');
  return { authority: undefined, path: mark < 0 ? bare : bare.slice(0, mark), query: mark < 0 ? '' : bare.slice(mark + 1) };
}

/** `decodeURIComponent`, or null for a malformed percent-encoding. */
export function decodeComponent(text: string): string | null {
  try {
    return decodeURIComponent(text);
  } catch {
    return null;
  }
}

interface HostName {
  /** Lower case; an IPv6 address in brackets, as it appears in a Host header. */
  name: string;
  port: number | undefined;
}

const AUTHORITY = /^(\[[0-9a-f:.]+\]|[^\s:/?#@[\]\\]+)(?::(\d{1,5}))?$/i;

/** Whether `text` is a host as a Host header gives it: `NAME`, `NAME:PORT`, `[IPv6]` or `[IPv6]:PORT`. */
export function isHostName(text: string): boolean {
  return parseAuthority(text) !== null;
}

function parseAuthority(text: string): HostName | null {
  const match = AUTHORITY.exec(text);
  if (!match) return null;
  const port = match[2] === undefined ? undefined : Number(match[2]);
  if (port !== undefined && port > 65535) return null;
  return { name: (match[1] as string).toLowerCase(), port };
}

/** An address as a Host names it: IPv6 in brackets, an IPv4-mapped IPv6 address as IPv4. */
function hostNameOfAddress(address: string): string {
  const plain = address.toLowerCase().replace(/^::ffff:(\d+\.\d+\.\d+\.\d+)$/, '$1');
  return plain.includes(':') ? `[${plain}]` : plain;
}

const LOOPBACK_NAMES = ['127.0.0.1', 'localhost', '[::1]'];
const WILDCARDS = new Set(['0.0.0.0', '::', '[::]', '']);

/** The connection a request came over; an injected request (`app.inject`) has neither field. */
export interface Connection {
  localAddress?: string | undefined;
  localPort?: number | undefined;
}

export interface HostRule {
  /** Whether `authority` (the Host header, or an absolute-form target's authority) names this server on `connection`. */
  allows(authority: string | undefined, connection: Connection): boolean;
  /** One sentence for a refused request. */
  refusal(connection: Connection): string;
}

/**
 * Answers to 127.0.0.1, localhost and [::1], to the bound host when it is a name or an address
 * (not a wildcard), to the address the connection was made to (so a wildcard bind answers on each
 * of the machine's addresses), all on the listening port, and to `extraHosts`: `NAME` on the
 * listening port, `NAME:PORT` on that port only (a forwarded port). A Host without a port means 80.
 * A bad entry in `extraHosts` throws, naming it.
 */
export function createHostRule(boundHost: string, extraHosts: readonly string[]): HostRule {
  const fixed = new Set(LOOPBACK_NAMES);
  if (!WILDCARDS.has(boundHost)) fixed.add(hostNameOfAddress(boundHost));
  const extras = extraHosts.map((entry) => {
    const parsed = parseAuthority(entry.trim());
    if (!parsed) throw new Error(`options.allowedHosts: "${entry}" is not a host name (NAME or NAME:PORT)`);
    return parsed;
  });
  return {
    allows(authority, connection) {
      const given = parseAuthority(authority ?? '');
      if (!given) return false;
      const port = given.port ?? 80;
      // An injected request came over no socket: only its name can be checked.
      const onOurPort = connection.localPort === undefined || port === connection.localPort;
      if (onOurPort && fixed.has(given.name)) return true;
      if (onOurPort && connection.localAddress !== undefined && hostNameOfAddress(connection.localAddress) === given.name) return true;
      return extras.some((e) => e.name === given.name && (e.port === undefined ? onOurPort : e.port === port));
    },
    refusal(connection) {
      const port = connection.localPort === undefined ? '' : `:${connection.localPort}`;
      return `this server answers only to its own address (such as 127.0.0.1${port}); another name must be allowed with --allow-host when the server starts`;
    },
  };
}
