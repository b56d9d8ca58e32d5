/**
 * The textbook shorthand for layer sequences: letters stand for quarter-wave layers of bound
 * materials, a number before a letter multiplies its optical thickness, and a parenthesised
 * group with `^N` repeats N times — e.g. `(HL)^7 H`, `(0.5L H 0.5L)^5`, `2H L 1.5M`.
 * (Notation as in Macleod, *Thin-Film Optical Filters*; from memory.)
 *
 * fringe reads a formula in deposition order: the first symbol is the layer on the substrate.
 */

export interface ShorthandLayer {
  symbol: string;
  /** Optical thickness in quarter-waves at the reference wavelength. */
  quarterWaves: number;
}

export type ShorthandResult =
  | { ok: true; layers: ShorthandLayer[] }
  | { ok: false; offset: number; message: string };

const MAX_LAYERS = 10_000;
const MAX_DEPTH = 100;

class ShorthandSyntaxError extends Error {
  constructor(
    readonly offset: number,
    message: string,
  ) {
    super(message);
  }
}

/** Expands a shorthand formula into layers; never throws. */
export function expandShorthand(formula: string): ShorthandResult {
  let pos = 0;
  const skipSpace = (): void => {
    while (pos < formula.length && /\s/.test(formula[pos] as string)) pos++;
  };
  const parseNumber = (): number | null => {
    const match = /^(\d+(\.\d*)?|\.\d+)/.exec(formula.slice(pos));
    if (!match) return null;
    pos += match[0].length;
    return Number(match[0]);
  };
  const parseSequence = (depth: number): ShorthandLayer[] => {
    const out: ShorthandLayer[] = [];
    for (;;) {
      skipSpace();
      if (pos >= formula.length || formula[pos] === ')') return out;
      const start = pos;
      const factor = parseNumber() ?? 1;
      skipSpace();
      const ch = formula[pos];
      let group: ShorthandLayer[];
      if (ch === '(') {
        if (depth >= MAX_DEPTH) throw new ShorthandSyntaxError(pos, `groups nest more than ${MAX_DEPTH} deep`);
        pos++;
        group = parseSequence(depth + 1);
        if (formula[pos] !== ')') throw new ShorthandSyntaxError(pos, 'a "(" is not closed');
        pos++;
        if (group.length === 0) throw new ShorthandSyntaxError(start, 'an empty group "()"');
        group = group.map((l) => ({ symbol: l.symbol, quarterWaves: l.quarterWaves * factor }));
      } else if (ch !== undefined && /[A-Za-z]/.test(ch)) {
        pos++;
        group = [{ symbol: ch, quarterWaves: factor }];
      } else {
        throw new ShorthandSyntaxError(pos, ch === undefined ? 'a number must be followed by a layer symbol' : `unexpected "${ch}"`);
      }
      skipSpace();
      if (formula[pos] === '^') {
        pos++;
        skipSpace();
        const at = pos;
        const repeat = parseNumber();
        if (repeat === null || !Number.isInteger(repeat) || repeat < 1) {
          throw new ShorthandSyntaxError(at, 'a "^" must be followed by a whole number of repeats (1 or more)');
        }
        const once = group;
        group = [];
        for (let i = 0; i < repeat; i++) {
          group.push(...once);
          if (group.length > MAX_LAYERS) throw new ShorthandSyntaxError(at, `expands to more than ${MAX_LAYERS} layers`);
        }
      }
      if (factor === 0 || !Number.isFinite(factor)) throw new ShorthandSyntaxError(start, factor === 0 ? 'a zero multiplier makes no layer' : 'a multiplier too large for a thickness');
      out.push(...group);
      if (out.length > MAX_LAYERS) throw new ShorthandSyntaxError(start, `expands to more than ${MAX_LAYERS} layers`);
      if (depth === 0 && formula[pos] === ')') throw new ShorthandSyntaxError(pos, 'a ")" without its "("');
    }
  };
  try {
    const layers = parseSequence(0);
    if (pos < formula.length) throw new ShorthandSyntaxError(pos, 'a ")" without its "("');
    if (layers.length === 0) throw new ShorthandSyntaxError(0, 'the formula holds no layer');
    return { ok: true, layers };
  } catch (error) {
    if (error instanceof ShorthandSyntaxError) return { ok: false, offset: error.offset, message: error.message };
    throw error;
  }
}
