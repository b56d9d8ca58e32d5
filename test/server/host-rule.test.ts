// The names the server answers to, and request targets split without throwing: every Host a
// browser could send for this server on its port passes; other names, other ports and text that
// is not a host are refused; nothing throws, whatever the text.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { createHostRule, decodeComponent, splitTarget } from '../../src/server/host-rule.ts';

const on7300 = { localAddress: '127.0.0.1', localPort: 7300 };

describe('the host rule', () => {
  it('answers to the loopback names on the listening port, and to nothing else when bound to loopback', () => {
    const rule = createHostRule('127.0.0.1', []);
    for (const host of ['127.0.0.1:7300', 'localhost:7300', 'LOCALHOST:7300', '[::1]:7300']) expect(rule.allows(host, on7300), host).toBe(true);
    for (const host of ['127.0.0.1:7301', 'localhost', 'evil.example:7300', 'localhost.evil.example:7300', '[x', '', 'a:b:c', '127.0.0.1:7300 ', 'user@localhost:7300', 'localhost:99999', '[::2]:7300']) {
      expect(rule.allows(host, on7300), host).toBe(false);
    }
    expect(rule.allows(undefined, on7300)).toBe(false);
  });

  it('answers to the bound host, and to the address a connection reached on a wildcard bind', () => {
    expect(createHostRule('coater-pc.lab', []).allows('coater-pc.lab:7300', on7300)).toBe(true);
    expect(createHostRule('fe80::1', []).allows('[fe80::1]:7300', on7300)).toBe(true);
    const wildcard = createHostRule('0.0.0.0', []);
    expect(wildcard.allows('192.168.1.5:7300', { localAddress: '192.168.1.5', localPort: 7300 })).toBe(true);
    expect(wildcard.allows('192.168.1.5:7300', { localAddress: '::ffff:192.168.1.5', localPort: 7300 })).toBe(true);
    expect(createHostRule('::', []).allows('[fd00::5]:7300', { localAddress: 'fd00::5', localPort: 7300 })).toBe(true);
    // Not an address of this connection, and no name is taken on trust.
    expect(wildcard.allows('192.168.1.6:7300', { localAddress: '192.168.1.5', localPort: 7300 })).toBe(false);
    expect(wildcard.allows('0.0.0.0:7300', { localAddress: '192.168.1.5', localPort: 7300 })).toBe(false);
    expect(wildcard.allows('coater-pc:7300', { localAddress: '192.168.1.5', localPort: 7300 })).toBe(false);
  });

  it('answers to the extra names: a bare name on the listening port, NAME:PORT on that port only', () => {
    const rule = createHostRule('0.0.0.0', ['Coater-PC', 'coater-pc.lab.example', 'localhost:8080']);
    expect(rule.allows('coater-pc:7300', on7300)).toBe(true);
    expect(rule.allows('coater-pc.lab.example:7300', on7300)).toBe(true);
    expect(rule.allows('coater-pc:7301', on7300)).toBe(false);
    expect(rule.allows('localhost:8080', on7300)).toBe(true);
    expect(rule.allows('coater-pc:8080', on7300)).toBe(false);
  });

  it('means port 80 by a Host without a port', () => {
    const rule = createHostRule('127.0.0.1', []);
    expect(rule.allows('localhost', { localAddress: '127.0.0.1', localPort: 80 })).toBe(true);
    expect(rule.allows('localhost', on7300)).toBe(false);
  });

  it('checks only the name of a request that came over no socket (app.inject)', () => {
    const rule = createHostRule('127.0.0.1', []);
    expect(rule.allows('localhost:80', {})).toBe(true);
    expect(rule.allows('evil.example:80', {})).toBe(false);
  });

  it('refuses a bad extra name at construction, naming it', () => {
    expect(() => createHostRule('127.0.0.1', ['coater pc'])).toThrow('options.allowedHosts: "coater pc" is not a host name');
    expect(() => createHostRule('127.0.0.1', ['http://coater-pc/'])).toThrow(/allowedHosts/);
  });

  it('says in one sentence how to reach the server', () => {
    const sentence = createHostRule('127.0.0.1', []).refusal(on7300);
    expect(sentence).toContain('127.0.0.1:7300');
    expect(sentence).toContain('--allow-host');
    expect(sentence.split('. ')).toHaveLength(1);
  });

  it('never throws, whatever the Host', () => {
    const rule = createHostRule('0.0.0.0', ['coater-pc']);
    fc.assert(
      fc.property(fc.string({ unit: 'binary', maxLength: 80 }), fc.option(fc.string({ maxLength: 40 }), { nil: undefined }), (host, localAddress) => {
        expect(typeof rule.allows(host, { localAddress, localPort: 7300 })).toBe('boolean');
      }),
      { seed: 17, numRuns: 500 },
    );
  });
});

describe('request targets', () => {
  it('splits origin-form and absolute-form targets without decoding', () => {
    expect(splitTarget('/api/runs/%E0%A4%A/replay?speed=5#x')).toEqual({ authority: undefined, path: '/api/runs/%E0%A4%A/replay', query: 'speed=5' });
    expect(splitTarget('http://[x/api/live?viewer=a')).toEqual({ authority: '[x', path: '/api/live', query: 'viewer=a' });
    expect(splitTarget('http://evil.example')).toEqual({ authority: 'evil.example', path: '/', query: '' });
    expect(splitTarget('*')).toEqual({ authority: undefined, path: '*', query: '' });
  });

  it('decodes a percent-encoding, or gives null for a malformed one', () => {
    expect(decodeComponent('run%2D1')).toBe('run-1');
    expect(decodeComponent('%E0%A4%A')).toBeNull();
    expect(decodeComponent('%')).toBeNull();
  });

  it('never throws, whatever the target', () => {
    fc.assert(
      fc.property(fc.string({ unit: 'binary', maxLength: 120 }), (url) => {
        const target = splitTarget(url);
        expect(typeof target.path).toBe('string');
        expect(typeof decodeComponent(target.path)).not.toBe('undefined');
      }),
      { seed: 17, numRuns: 500 },
    );
  });
});
