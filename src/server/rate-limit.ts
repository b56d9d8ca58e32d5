/**
 * Token buckets, one per client address: a bucket holds up to `burst` tokens and gains
 * `perSecond` of them every second. The clock is injected so that tests step time by hand.
 */

export interface BucketRule {
  /** Tokens a bucket holds when full: requests allowed at once after a quiet spell. */
  burst: number;
  /** Tokens regained per second: the sustained rate. */
  perSecond: number;
}

export interface RateLimiter {
  /** Takes one token from `key`'s bucket: null when there was one, else the whole seconds until there will be. */
  take(key: string): number | null;
  /** Like {@link take} without taking: null when `key` has a token now, else the whole seconds until it will. */
  wait(key: string): number | null;
}

interface Bucket {
  tokens: number;
  atS: number;
}

/** Buckets kept at most; beyond this, full ones (clients quiet long enough) are forgotten first. */
const MAX_KEYS = 4096;

export function createRateLimiter(rule: BucketRule, nowS: () => number): RateLimiter {
  if (!(rule.burst >= 1) || !(rule.perSecond > 0)) throw new Error('a rate limit needs a burst of at least 1 and a positive rate');
  const buckets = new Map<string, Bucket>();

  const current = (key: string): Bucket => {
    const now = nowS();
    const bucket = buckets.get(key);
    if (!bucket) return { tokens: rule.burst, atS: now };
    // A clock that steps back must not mint tokens.
    const elapsed = Math.max(0, now - bucket.atS);
    return { tokens: Math.min(rule.burst, bucket.tokens + elapsed * rule.perSecond), atS: Math.max(now, bucket.atS) };
  };
  const secondsUntilOne = (bucket: Bucket): number => Math.max(1, Math.ceil((1 - bucket.tokens) / rule.perSecond));

  function remember(key: string, bucket: Bucket): void {
    buckets.delete(key);
    buckets.set(key, bucket);
    if (buckets.size <= MAX_KEYS) return;
    for (const [other] of buckets) {
      if (other !== key && current(other).tokens >= rule.burst) buckets.delete(other);
    }
    // Still too many: the least recently seen go (the map keeps insertion order).
    for (const [other] of buckets) {
      if (buckets.size <= MAX_KEYS) break;
      buckets.delete(other);
    }
  }

  return {
    take(key) {
      const bucket = current(key);
      if (bucket.tokens < 1) {
        remember(key, bucket);
        return secondsUntilOne(bucket);
      }
      remember(key, { tokens: bucket.tokens - 1, atS: bucket.atS });
      return null;
    },
    wait(key) {
      const bucket = current(key);
      return bucket.tokens < 1 ? secondsUntilOne(bucket) : null;
    },
  };
}
