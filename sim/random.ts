/**
 * Seeded randomness for the virtual chamber: a small, fast generator of good statistical quality,
 * independent sub-streams per purpose, uniform, Gaussian and exponential variates, and an
 * Ornstein–Uhlenbeck process with exact discretisation.
 *
 * Why sub-streams: every random feature of the chamber (one source's rate noise, the detector
 * noise, the spikes, a shutter's jitter …) draws from its own stream derived from the run seed
 * and a purpose string, so switching one feature on or off never changes the numbers another
 * feature sees. The same seed and purpose always give the same stream, on any platform with
 * IEEE-754 doubles (the generator itself is pure 32-bit integer arithmetic).
 */

/** A stream of random numbers; every method advances the stream. */
export interface RandomStream {
  /** The next 32-bit output, as an unsigned integer 0 … 2³² − 1. */
  nextUint32(): number;
  /** Uniform on [0, 1), 53 random bits. */
  uniform(): number;
  /** Standard normal N(0, 1). */
  gaussian(): number;
  /** Exponential with mean 1. */
  exponential(): number;
}

const TWO_POW_26 = 67108864;
const TWO_POW_53 = 9007199254740992;
const MASK_64 = (1n << 64n) - 1n;

/**
 * One step of SplitMix64 (G. L. Steele, D. Lea, C. H. Flood, "Fast splittable pseudorandom number
 * generators", OOPSLA 2014): the recommended way to seed the xoshiro family from one integer.
 * Returns [next state, output]. BigInt, so only used when a stream is created.
 */
function splitMix64(state: bigint): [bigint, bigint] {
  const next = (state + 0x9e3779b97f4a7c15n) & MASK_64;
  let z = next;
  z = ((z ^ (z >> 30n)) * 0xbf58476d1ce4e5b9n) & MASK_64;
  z = ((z ^ (z >> 27n)) * 0x94d049bb133111ebn) & MASK_64;
  return [next, z ^ (z >> 31n)];
}

/** FNV-1a, 64-bit, over the string's UTF-16 code units (Fowler, Noll, Vo; the published offset basis and prime). */
function fnv1a64(text: string): bigint {
  let h = 0xcbf29ce484222325n;
  for (let i = 0; i < text.length; i++) {
    h ^= BigInt(text.charCodeAt(i));
    h = (h * 0x100000001b3n) & MASK_64;
  }
  return h;
}

/**
 * xoshiro128** (D. Blackman and S. Vigna, "Scrambled linear pseudorandom number generators",
 * ACM Trans. Math. Softw. 47(4), 36 (2021)): 128 bits of state, period 2¹²⁸ − 1, passes BigCrush;
 * 32-bit operations only, which JavaScript does exactly with `Math.imul` and `>>> 0`.
 */
class Xoshiro128StarStar implements RandomStream {
  private s0: number;
  private s1: number;
  private s2: number;
  private s3: number;
  /** The second value of the last polar pair, or NaN. */
  private spare = Number.NaN;

  constructor(words: readonly [number, number, number, number]) {
    [this.s0, this.s1, this.s2, this.s3] = words;
    if ((this.s0 | this.s1 | this.s2 | this.s3) === 0) this.s0 = 1; // the all-zero state is a fixed point
  }

  nextUint32(): number {
    const s1 = this.s1;
    // result = rotl(s1 · 5, 7) · 9
    const m = Math.imul(s1, 5);
    const result = Math.imul((m << 7) | (m >>> 25), 9) >>> 0;
    const t = s1 << 9;
    this.s2 ^= this.s0;
    this.s3 ^= s1;
    this.s1 ^= this.s2;
    this.s0 ^= this.s3;
    this.s2 ^= t;
    this.s3 = (this.s3 << 11) | (this.s3 >>> 21);
    return result;
  }

  uniform(): number {
    // 27 + 26 high bits of two outputs make one 53-bit fraction (the usual double construction)
    const a = this.nextUint32() >>> 5;
    const b = this.nextUint32() >>> 6;
    return (a * TWO_POW_26 + b) / TWO_POW_53;
  }

  gaussian(): number {
    const spare = this.spare;
    if (spare === spare) {
      this.spare = Number.NaN;
      return spare;
    }
    // Marsaglia's polar method (G. Marsaglia and T. A. Bray, SIAM Review 6, 260 (1964))
    let u: number;
    let v: number;
    let s: number;
    do {
      u = 2 * this.uniform() - 1;
      v = 2 * this.uniform() - 1;
      s = u * u + v * v;
    } while (s >= 1 || s === 0);
    const f = Math.sqrt((-2 * Math.log(s)) / s);
    this.spare = v * f;
    return u * f;
  }

  exponential(): number {
    // inversion: −ln(1 − U), 1 − U in (0, 1]
    return -Math.log(1 - this.uniform());
  }
}

/**
 * The stream for `purpose` (any string, e.g. `"source/TiO2/rate"`) of the run `seed` (a safe
 * integer). Different purposes give statistically independent streams; the same pair always
 * gives the same stream.
 */
export function createRandomStream(seed: number, purpose: string): RandomStream {
  if (!Number.isSafeInteger(seed)) throw new RangeError(`the seed must be a safe integer, got ${seed}`);
  // Mix the seed first so that neighbouring seeds and the purpose hash cannot cancel.
  const [, mixedSeed] = splitMix64(BigInt.asUintN(64, BigInt(seed)));
  const [state, a] = splitMix64(mixedSeed ^ fnv1a64(purpose));
  const [, b] = splitMix64(state);
  return new Xoshiro128StarStar([
    Number(a & 0xffffffffn),
    Number(a >> 32n),
    Number(b & 0xffffffffn),
    Number(b >> 32n),
  ]);
}

/**
 * A generator started from four explicit 32-bit state words (not all zero): for checking the
 * port against the reference algorithm. Runs use {@link createRandomStream}.
 */
export function xoshiro128StarStarFromState(words: readonly [number, number, number, number]): RandomStream {
  return new Xoshiro128StarStar([words[0] | 0, words[1] | 0, words[2] | 0, words[3] | 0]);
}

/**
 * An Ornstein–Uhlenbeck process dx = −x/τ dt + σ√(2/τ) dW: Gaussian, stationary variance σ²,
 * autocorrelation e^{−|Δ|/τ}. Advanced by the exact update
 * x(t+Δ) = x(t)·e^{−Δ/τ} + σ√(1 − e^{−2Δ/τ})·ξ (D. T. Gillespie, Phys. Rev. E 54, 2084 (1996)),
 * so any step length gives the right statistics. Starts in the stationary state, x(0) ~ N(0, σ²).
 * σ = 0 gives x ≡ 0 and draws nothing.
 */
export class OrnsteinUhlenbeck {
  private x: number;
  private lastStepS = Number.NaN;
  private decay = 0;
  private kick = 0;

  constructor(
    private readonly stream: RandomStream,
    /** Stationary rms. */
    readonly sigma: number,
    /** Correlation time τ, s (> 0). */
    readonly correlationS: number,
  ) {
    if (!(sigma >= 0) || !(correlationS > 0)) throw new RangeError('the OU process needs σ ≥ 0 and τ > 0');
    this.x = sigma > 0 ? sigma * stream.gaussian() : 0;
  }

  get value(): number {
    return this.x;
  }

  /** Advances by `stepS` (≥ 0) and returns the new value. */
  step(stepS: number): number {
    if (this.sigma === 0) return 0;
    if (stepS !== this.lastStepS) {
      // the two coefficients depend on Δ only: cache them for the usual fixed step
      this.lastStepS = stepS;
      this.decay = Math.exp(-stepS / this.correlationS);
      this.kick = this.sigma * Math.sqrt(-Math.expm1((-2 * stepS) / this.correlationS));
    }
    this.x = this.x * this.decay + this.kick * this.stream.gaussian();
    return this.x;
  }
}
