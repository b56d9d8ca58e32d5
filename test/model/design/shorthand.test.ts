// The layer shorthand `(HL)^7 H`: expansion, error offsets, and that it never throws.
// Notation as in Macleod, Thin-Film Optical Filters (from memory): a letter is one quarter-wave of
// its material, a number before it scales the optical thickness, `( … )^N` repeats a group N times.
import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { expandShorthand, type ShorthandLayer } from '../../../src/model/design/shorthand.ts';

function layersOf(formula: string): ShorthandLayer[] {
  const result = expandShorthand(formula);
  if (!result.ok) throw new Error(`"${formula}" refused: ${result.message} at ${result.offset}`);
  return result.layers;
}

function errorOf(formula: string): { offset: number; message: string } {
  const result = expandShorthand(formula);
  if (result.ok) throw new Error(`"${formula}" was accepted as ${JSON.stringify(result.layers)}`);
  return { offset: result.offset, message: result.message };
}

const word = (layers: ShorthandLayer[]): string => layers.map((l) => l.symbol).join('');

describe('expandShorthand: expansions', () => {
  it('(HL)^7 H gives 15 alternating quarter-waves, H first (on the substrate) and last', () => {
    const layers = layersOf('(HL)^7 H');
    expect(layers).toHaveLength(15);
    expect(word(layers)).toBe('HLHLHLHLHLHLHLH');
    expect(layers.every((l) => l.quarterWaves === 1)).toBe(true);
  });

  it('(0.5L H 0.5L)^3 gives 9 layers with the half-wave factors kept per layer', () => {
    const layers = layersOf('(0.5L H 0.5L)^3');
    expect(layers).toHaveLength(9);
    expect(word(layers)).toBe('LHLLHLLHL');
    expect(layers.map((l) => l.quarterWaves)).toEqual([0.5, 1, 0.5, 0.5, 1, 0.5, 0.5, 1, 0.5]);
  });

  it('expands nested groups from the inside out: ((HL)^2 M)^2', () => {
    expect(word(layersOf('((HL)^2 M)^2'))).toBe('HLHLMHLHLM');
  });

  it('reads coefficients such as 2H and .5L, and a coefficient before a group scales every layer in it', () => {
    expect(layersOf('2H .5L 1.5M')).toEqual([
      { symbol: 'H', quarterWaves: 2 },
      { symbol: 'L', quarterWaves: 0.5 },
      { symbol: 'M', quarterWaves: 1.5 },
    ]);
    expect(layersOf('2(HL)^2').map((l) => l.quarterWaves)).toEqual([2, 2, 2, 2]);
  });

  it('needs no whitespace between layers, and ignores whitespace around ^ and numbers', () => {
    expect(word(layersOf('HLHL'))).toBe('HLHL');
    expect(layersOf('HLHL')).toEqual(layersOf(' H L  H\tL '));
    expect(layersOf('(HL) ^ 3')).toEqual(layersOf('(HL)^3'));
    expect(layersOf('2 H')).toEqual([{ symbol: 'H', quarterWaves: 2 }]);
  });
});

describe('expandShorthand: errors point at the offending character', () => {
  it('an unclosed "(" is reported where the ")" was expected (the end of the formula)', () => {
    const e = errorOf('(HL');
    expect(e.message).toMatch(/not closed/);
    expect(e.offset).toBe(3);
  });

  it('a stray ")" is reported at its own position', () => {
    expect(errorOf('HL)H')).toEqual({ offset: 2, message: expect.stringMatching(/"\)" without its "\("/) as unknown });
    expect(errorOf('(HL))').offset).toBe(4);
  });

  it('^0 and ^1.5 are refused at the repeat count', () => {
    for (const formula of ['(HL)^0', '(HL)^1.5', '(HL)^', '(HL)^x']) {
      const e = errorOf(formula);
      expect(e.offset, formula).toBe(5);
      expect(e.message, formula).toMatch(/whole number of repeats/);
    }
  });

  it('an empty group is refused at its "("', () => {
    expect(errorOf('H ()^2')).toEqual({ offset: 2, message: expect.stringMatching(/empty group/) as unknown });
  });

  it('a number with no layer after it is refused just after the number', () => {
    const e = errorOf('3');
    expect(e.offset).toBe(1);
    expect(e.message).toMatch(/followed by a layer symbol/);
  });

  it('a character outside the notation is named and located', () => {
    expect(errorOf('H$')).toEqual({ offset: 1, message: 'unexpected "$"' });
    expect(errorOf('HL ^2^3').offset).toBe(5);
  });

  it('an empty or blank formula holds no layer', () => {
    expect(errorOf('').message).toMatch(/no layer/);
    expect(errorOf('   ').message).toMatch(/no layer/);
  });

  it('a zero multiplier is refused, and so is one too large to be a number', () => {
    expect(errorOf('H 0L')).toEqual({ offset: 2, message: expect.stringMatching(/zero multiplier/) as unknown });
    // 400 digits overflow to Infinity: no finite thickness can come of it.
    const huge = `H ${'9'.repeat(400)}L`;
    expect(errorOf(huge).offset).toBe(2);
  });

  it('refuses a formula that expands past the layer limit instead of building it', () => {
    expect(errorOf('((HL)^100)^100').message).toMatch(/more than 10000 layers/);
  });

  it('refuses groups nested deeper than the limit instead of exhausting the stack', () => {
    const deep = `${'('.repeat(50_000)}H${')'.repeat(50_000)}`;
    const result = expandShorthand(deep);
    expect(result.ok).toBe(false);
    expect(word(layersOf(`${'('.repeat(20)}HL${')'.repeat(20)}`))).toBe('HL');
  });
});

describe('expandShorthand: properties', () => {
  it('never throws: any string gives layers, or an error with 0 ≤ offset ≤ length', () => {
    const alphabet = fc.constantFrom(...'HLM()^ .0123456789$\t-e'.split(''));
    const notationish = fc.array(alphabet, { maxLength: 40 }).map((cs) => cs.join(''));
    fc.assert(
      fc.property(fc.oneof(fc.string({ maxLength: 60 }), notationish), (formula) => {
        const result = expandShorthand(formula);
        if (result.ok) {
          expect(result.layers.length).toBeGreaterThan(0);
          for (const l of result.layers) expect(l.quarterWaves > 0 && Number.isFinite(l.quarterWaves)).toBe(true);
        } else {
          expect(result.offset).toBeGreaterThanOrEqual(0);
          expect(result.offset).toBeLessThanOrEqual(formula.length);
          expect(result.message.length).toBeGreaterThan(0);
        }
      }),
      { numRuns: 2000 },
    );
  });

  // Valid formulas built from a small grammar: a layer is an optional coefficient and a letter;
  // a group is a bracketed sequence with an optional repeat.
  const { formula } = fc.letrec<{ formula: string; item: string }>((tie) => ({
    formula: fc.array(tie('item'), { minLength: 1, maxLength: 4 }).map((items) => items.join(' ')),
    item: fc.oneof(
      { depthSize: 'small', withCrossShrink: true },
      fc
        .tuple(fc.constantFrom('', '2', '0.5', '.25', '3'), fc.constantFrom('H', 'L', 'M', 'a'))
        .map(([c, s]) => c + s),
      fc.tuple(tie('formula'), fc.integer({ min: 1, max: 3 })).map(([f, n]) => `(${f})^${n}`),
    ),
  }));

  it('(X)^n gives n copies of the layers of X, in order', () => {
    fc.assert(
      fc.property(formula, fc.integer({ min: 1, max: 6 }), (x, n) => {
        const once = layersOf(x);
        const repeated = layersOf(`(${x})^${n}`);
        expect(repeated).toHaveLength(n * once.length);
        for (let i = 0; i < n; i++) expect(repeated.slice(i * once.length, (i + 1) * once.length)).toEqual(once);
      }),
      { numRuns: 300 },
    );
  });

  it('a coefficient c before (X) multiplies every optical thickness of X by c', () => {
    fc.assert(
      fc.property(formula, fc.constantFrom(2, 0.5, 3), (x, c) => {
        const once = layersOf(x);
        const scaled = layersOf(`${c}(${x})`);
        expect(scaled.map((l) => l.symbol)).toEqual(once.map((l) => l.symbol));
        scaled.forEach((l, i) => expect(l.quarterWaves).toBeCloseTo(c * (once[i] as ShorthandLayer).quarterWaves, 12));
      }),
      { numRuns: 300 },
    );
  });
});
