// The token buckets behind the command routes' limits, on a clock the test steps.
import { describe, expect, it } from 'vitest';
import { createRateLimiter } from '../../src/server/rate-limit.ts';

describe('rate limiter', () => {
  it('refills at its rate up to its burst, and a clock that steps back mints nothing', () => {
    let nowS = 1000;
    const limit = createRateLimiter({ burst: 2, perSecond: 0.25 }, () => nowS);
    expect([limit.take('a'), limit.take('a'), limit.take('a')]).toEqual([null, null, 4]);
    expect(limit.wait('a')).toBe(4);
    nowS = 1003;
    expect(limit.take('a')).toBe(1);
    nowS = 1004;
    expect(limit.wait('a')).toBeNull();
    expect(limit.take('a')).toBeNull();
    // Back in time: still empty, not refilled.
    nowS = 900;
    expect(limit.take('a')).toBe(4);
    // A long quiet spell fills the bucket to its burst, not beyond.
    nowS = 1_000_000;
    expect([limit.take('a'), limit.take('a'), limit.take('a')]).toEqual([null, null, expect.any(Number) as unknown]);
  });

  it('keeps a bounded number of addresses: the least recently seen are forgotten first', () => {
    const limit = createRateLimiter({ burst: 1, perSecond: 0.001 }, () => 0);
    expect(limit.take('first')).toBeNull();
    expect(limit.take('first')).not.toBeNull();
    for (let i = 0; i < 5000; i++) limit.take(`address-${i}`);
    // 'first' was pushed out (its bucket is new again); the latest is still remembered.
    expect(limit.take('first')).toBeNull();
    expect(limit.take('address-4999')).not.toBeNull();
  });

  it('refuses a rule that could never allow a request', () => {
    expect(() => createRateLimiter({ burst: 0, perSecond: 1 }, () => 0)).toThrow('a rate limit needs a burst of at least 1 and a positive rate');
    expect(() => createRateLimiter({ burst: 1, perSecond: 0 }, () => 0)).toThrow(/positive rate/);
  });
});
