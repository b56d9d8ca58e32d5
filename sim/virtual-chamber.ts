/**
 * The virtual box coater: from a resolved recipe, a simulator profile and a seed it produces the
 * readings an optical monitor and a quartz crystal monitor would give, and moves the source
 * shutters on command, with the faults real runs have. It uses the project's own optics
 * (`buildChipMonitor`) and crystal model (`stackFrequencyHz`) on the TRUE stack.
 *
 * Specification (what a caller may rely on):
 * - Time is the run clock in seconds from 0. `advance(untilS, sink)` produces every reading due
 *   at or before `untilS`, in time order (an optical and a crystal reading due at the same
 *   instant come optical first), and leaves the chamber at `untilS`. Shutter moves due in that
 *   span happen first at their instant, so a reading at the instant of a move already sees it.
 * - Optical samples are due at i/rate (i = 0, 1, …; rate = the profile's, else the recipe's, or
 *   one per substrate-holder revolution); crystal samples at j/rate likewise. A sample inside a
 *   dropout gives no reading; after the crystal fails no crystal reading comes.
 * - `command(cmd)`: the shutter of `cmd.source` moves at max(cmd.timeS, timeS) + delay + jitter
 *   (never before the command, never before that shutter's previous move), and an acknowledgement
 *   with the move's time becomes available from `takeAcks()` once `advance` has passed it. A
 *   command naming an unknown source, a layer outside the recipe, a layer before the last one
 *   opened, or the last opened layer with another source is refused: recorded in
 *   `truth().refused`, never moved, never acknowledged.
 * - Deposition of layer k runs from the actual open of its shutter to the actual close, or to
 *   the actual open of a later layer if that comes first (co-deposition is not modelled: the
 *   later layer takes over). Re-opening the last layer with its own source tops it up.
 * - Thickness: on the parts ∫rate (see `source-rate.ts`), on the chip × chipRatio × (1 + chip
 *   error), on the crystal ÷ (toolingFactor × (1 + tooling error)); exact to rounding.
 * - Optical reading at t: g(t)·S(t) + o(t) + ε (+ a spike), g = 1 + gain drift·t, o = offset
 *   drift·t, ε white Gaussian; S is the chip monitor (`layerMonitor`) on the true chip stack at the layer's
 *   monitor wavelength, pass band, angle and signal. The monitor follows the layer that opened
 *   last (a new chip starts bare when its first layer opens) and keeps that layer's settings
 *   until the next one opens; before the first open it shows layer 1's chip at layer 1's settings.
 * - Spectrum at t (a `spectral` monitor in the profile, every 1/rate s from 0, after the optical
 *   and crystal readings of the same instant): per grid wavelength g(t)·(S + s)/(1 + s) + o(t) + ε
 *   (`SpectralMonitorSettingsSchema`), S the chip's T or R on the true chip stack at the monitor
 *   layer's angle and signal, averaged over the slit; noise from its own random stream.
 * - Crystal reading at t: stackFrequencyHz(f_bare, true crystal layers including the growing
 *   one) + shift·h(t) + ε (+ the mode hop after its time), h the heat load (profile notes).
 * - Determinism: the seed fixes every random number (one sub-stream per purpose, `random.ts`);
 *   the same recipe, profile, seed and commands give the same readings bit for bit.
 */
import { deepFreeze } from '../src/config/read-config.ts';
import { stackFrequencyHz, crystalLifeUsed, type CrystalLayer } from '../src/model/crystal/index.ts';
import { indexAt, scaledDispersion, type Dispersion } from '../src/model/optics/dispersion.ts';
import type { ChipMonitor } from '../src/model/plan/chip-monitor.ts';
import { buildChipSpectrum, wavelengthRange, type ChipSpectrum } from '../src/model/plan/chip-spectrum.ts';
import { chipFaces, layerMonitor } from '../src/model/plan/plan.ts';
import type { LayerRecipe, ResolvedRecipe } from '../src/model/plan/recipe.ts';
import type { StackSpec } from '../src/model/optics/optical-model.ts';
import type { Reading, ShutterAck, ShutterCommand, SpectrumReading } from '../src/pipeline/types.ts';
import { materialSettingsFor, sourceSettingsFor, type SimProfile, type SourceSettings } from './profile.ts';
import { createRandomStream, type RandomStream } from './random.ts';
import { SourceRate } from './source-rate.ts';

/** Sub-layers of an inhomogeneous layer per planned chip thickness. */
export const INHOMOGENEITY_SLICES = 8;

export interface VirtualChamber {
  /** The chamber's clock, s: where the last `advance` left it. */
  readonly timeS: number;
  /**
   * Produces every reading due up to `untilS` (inclusive), in time order, into `sink`; with a
   * spectral monitor in the profile, its spectra into `spectra` (without that sink none are
   * computed, and the other readings are the same either way).
   */
  advance(untilS: number, sink: (reading: Reading) => void, spectra?: (spectrum: SpectrumReading) => void): void;
  /** The spectral monitor's wavelengths, nm (undefined without one in the profile): every spectrum carries this array. */
  readonly spectralGridNm: Float64Array | undefined;
  /** Time the next reading is due, s (a crystal sample may find the crystal failed and give none). */
  nextReadingTimeS(): number;
  /**
   * A shutter command from the controller, effective at `cmd.timeS` (or now, if that is past);
   * the shutter moves after its true delay and jitter. `open` starts layer `cmd.layer` with
   * material `cmd.source`.
   */
  command(cmd: ShutterCommand): void;
  /** Acknowledgements of shutter moves since the last call, in time order. */
  takeAcks(): ShutterAck[];
  /** Ground truth now (a fresh copy each call). */
  truth(): ChamberTruth;
}

/** A sub-layer of uniform index on the chip (one per layer unless the layer is inhomogeneous). */
export interface TrueSlice {
  readonly dispersion: Dispersion;
  readonly chipNm: number;
}

export interface TrueLayer {
  readonly number: number;
  readonly material: string;
  /** Index into `recipe.chips`. */
  readonly chip: number;
  readonly growing: boolean;
  readonly partNm: number;
  readonly chipNm: number;
  readonly crystalNm: number;
  /** Actual time of the first open, s. */
  readonly openS: number;
  /** Actual end of the last deposition, s; null while it grows. */
  readonly closeS: number | null;
  readonly endedBy: 'close' | 'next-open' | null;
  /** 1, or more when the layer was topped up. */
  readonly openings: number;
  /** The layer's monitor wavelength (recipe), nm, and the true mean n and k there. */
  readonly wavelengthNm: number;
  readonly nTrue: number;
  readonly kTrue: number;
  /** Sub-layers from the bottom; their chipNm add up to `chipNm`. */
  readonly slices: readonly TrueSlice[];
}

export interface TrueMaterial {
  /** The true dispersion (the mean over the planned thickness, for an inhomogeneous film). */
  readonly dispersion: Dispersion;
  /** n_true / n_design: offset and this seed's scatter. */
  readonly indexFactor: number;
  readonly extraK: number;
  readonly inhomogeneityPercent: number;
  readonly densityGPerCm3: number;
  readonly zRatio: number;
}

export interface TrueSource {
  readonly plannedRateNmPerS: number;
  readonly chipRatio: number;
  readonly toolingFactor: number;
  readonly settings: SourceSettings;
  readonly shutterOpen: boolean;
}

export interface ShutterMove {
  readonly source: string;
  readonly action: 'open' | 'close';
  readonly layer: number;
  /** When the command took effect, s. */
  readonly commandS: number;
  /** When the shutter moves (moved), s. */
  readonly moveS: number;
  readonly done: boolean;
}

export interface ChamberTruth {
  readonly timeS: number;
  readonly layers: readonly TrueLayer[];
  readonly materials: Readonly<Record<string, TrueMaterial>>;
  readonly sources: Readonly<Record<string, TrueSource>>;
  readonly moves: readonly ShutterMove[];
  readonly refused: readonly { readonly command: ShutterCommand; readonly reason: string }[];
  readonly monitor: {
    /** The layer whose settings and chip the monitor uses. */
    readonly layer: number;
    readonly chip: number;
    /** S_true now: the signal without gain, offset, noise or spikes. */
    readonly signal: number;
    readonly gain: number;
    readonly offset: number;
    /** Times of the spikes so far, s. */
    readonly spikeTimesS: readonly number[];
    /** Dropout windows begun so far, [start, end) s. */
    readonly dropouts: readonly (readonly [number, number])[];
  };
  readonly crystal: {
    readonly bareFrequencyHz: number;
    /** The frequency of the true mass alone, Hz. */
    readonly massFrequencyHz: number;
    /** Heat load h, 0 … 1. */
    readonly heatLoad: number;
    readonly temperatureShiftHz: number;
    readonly failedAtS: number | null;
  };
}

interface MaterialState {
  readonly name: string;
  readonly design: Dispersion;
  readonly dispersion: Dispersion;
  readonly indexFactor: number;
  readonly extraK: number;
  readonly inhomogeneityPercent: number;
  readonly densityGPerCm3: number;
  readonly zRatio: number;
}

interface SourceState {
  readonly name: string;
  readonly material: MaterialState;
  readonly settings: SourceSettings;
  readonly plannedRateNmPerS: number;
  readonly rate: SourceRate;
  readonly jitter: RandomStream;
  /** chip thickness / part thickness and crystal thickness / part thickness, true. */
  readonly chipFactor: number;
  readonly crystalFactor: number;
  readonly chipRatio: number;
  readonly toolingFactor: number;
  open: boolean;
  lastMoveS: number;
}

interface LayerState {
  readonly number: number;
  readonly recipe: LayerRecipe;
  readonly source: SourceState;
  readonly chip: number;
  partNm: number;
  openS: number;
  closeS: number;
  endedBy: 'close' | 'next-open' | null;
  openings: number;
  readonly crystal: { thicknessNm: number; densityGPerCm3: number; zRatio: number };
  /** Planned chip thickness of one slice, nm (∞ for a homogeneous layer). */
  readonly sliceNm: number;
  readonly sliceDispersions: Dispersion[];
}

interface PendingMove {
  readonly source: SourceState;
  readonly action: 'open' | 'close';
  readonly layer: number;
  readonly commandS: number;
  readonly moveS: number;
  done: boolean;
}

/**
 * Builds a virtual chamber for `recipe` with the faults of `profile` and the random numbers of
 * `seed` (a safe integer). Throws when the profile names a material the recipe does not use (a
 * typo must not pass unnoticed).
 */
export function createVirtualChamber(recipe: ResolvedRecipe, profile: SimProfile, seed: number): VirtualChamber {
  if (!Number.isSafeInteger(seed)) throw new RangeError(`the seed must be a safe integer, got ${seed}`);
  const recipeMaterials = new Map<string, LayerRecipe>();
  for (const layer of recipe.layers) if (!recipeMaterials.has(layer.materialName)) recipeMaterials.set(layer.materialName, layer);
  const unknown = [...Object.keys(profile.sources), ...Object.keys(profile.materials)].filter(
    (name) => name !== 'default' && !recipeMaterials.has(name),
  );
  if (unknown.length > 0) {
    throw new RangeError(
      `the profile "${profile.name}" names ${[...new Set(unknown)].map((n) => `"${n}"`).join(', ')}, which the recipe does not use (it uses ${[...recipeMaterials.keys()].join(', ')})`,
    );
  }

  // ---- true materials and sources
  const materials = new Map<string, MaterialState>();
  const sources = new Map<string, SourceState>();
  for (const [name, first] of recipeMaterials) {
    const m = materialSettingsFor(profile, name);
    const scatter = m.indexScatterPercent > 0 ? m.indexScatterPercent * createRandomStream(seed, `material/${name}/index`).gaussian() : 0;
    const indexFactor = 1 + (m.indexOffsetPercent + scatter) / 100;
    const material: MaterialState = {
      name,
      design: first.dispersion,
      dispersion: frozen(scaledDispersion(first.dispersion, indexFactor, m.extraK), first.dispersion),
      indexFactor,
      extraK: m.extraK,
      inhomogeneityPercent: m.inhomogeneityPercent,
      densityGPerCm3: first.densityGPerCm3,
      zRatio: first.zRatio,
    };
    materials.set(name, material);
    const s = sourceSettingsFor(profile, name);
    const chipRatio = first.chipRatio * (1 + s.chipRatioErrorPercent / 100);
    const toolingFactor = first.toolingFactor * (1 + s.toolingErrorPercent / 100);
    sources.set(name, {
      name,
      material,
      settings: s,
      plannedRateNmPerS: first.rateNmPerS,
      rate: new SourceRate({ plannedRateNmPerS: first.rateNmPerS, ...s }, createRandomStream(seed, `source/${name}/rate`)),
      jitter: createRandomStream(seed, `source/${name}/shutter`),
      chipFactor: chipRatio,
      crystalFactor: 1 / toolingFactor,
      chipRatio,
      toolingFactor,
      open: false,
      lastMoveS: 0,
    });
  }

  // ---- instruments
  const optical = profile.optical;
  const opticalRateHz = optical.perRevolution ? optical.perRevolution.revolutionsPerMinute / 60 : (optical.sampleRateHz ?? recipe.monitor.sampleRateHz);
  const crystalRateHz = profile.crystal.sampleRateHz ?? recipe.crystal.sampleRateHz;
  const noiseSigma = optical.noisePercent / 100;
  const gainPerS = optical.gainDriftPercentPerHour / 100 / 3600;
  const offsetPerS = optical.offsetDriftPercentPerHour / 100 / 3600;
  const spikeSize = optical.spikePercent / 100;
  const spikePerS = optical.spikeRatePerHour / 3600;
  const opticalNoise = createRandomStream(seed, 'optical/noise');
  const spikeStream = createRandomStream(seed, 'optical/spikes');
  const dropouts = new DropoutSchedule(optical.dropouts, optical.dropoutRatePerHour / 3600, optical.dropoutDurationS, createRandomStream(seed, 'optical/dropouts'));
  let nextSpikeS = spikePerS > 0 ? spikeStream.exponential() / spikePerS : Number.POSITIVE_INFINITY;
  const spikeTimesS: number[] = [];

  const xtl = profile.crystal;
  const crystalNoise = createRandomStream(seed, 'crystal/noise');
  const crystalSigma = xtl.noiseHz;
  const f0 = recipe.crystal.bareFrequencyHz;
  const fMin = recipe.crystal.minUsableFrequencyHz;
  const failAt = xtl.failAtLifeFraction;
  const hop = xtl.modeHop;
  const crystalStack: CrystalLayer[] = [];
  let failedAtS = Number.NaN;

  // ---- state
  let timeS = 0;
  let optIndex = 0;
  let xtlIndex = 0;
  let heat = 0;
  let openShutters = 0;
  const layers: LayerState[] = [];
  let growing: LayerState | null = null;
  let lastCommanded: { layer: number; source: SourceState } | null = null;
  const pending: PendingMove[] = [];
  const moves: PendingMove[] = [];
  const refused: { command: ShutterCommand; reason: string }[] = [];
  let acks: ShutterAck[] = [];

  // The monitor: which layer it follows, the chip monitor built for it, and how many of that
  // layer's slices lie below the growing one.
  const firstLayer = recipe.layers[0] as LayerRecipe;
  let monitorLayer: LayerState | null = null;
  let monitorSlices = 0;
  let monitor: ChipMonitor = layerMonitor(recipe, firstLayer, [], (materials.get(firstLayer.materialName) as MaterialState).dispersion);

  // The spectral monitor: its grid, the chip's spectrum built with the monitor (the layers below
  // precomputed, so a spectrum costs one layer per sub-wavelength), and its baseline and noise.
  const spectral = profile.spectral;
  const spectralGridNm = spectral === undefined ? undefined : wavelengthRange(spectral.grid);
  const spectralNoise = createRandomStream(seed, 'spectral/noise');
  let spectralIndex = 0;
  const chipSpectrumOf = (layer: LayerRecipe, below: { dispersion: Dispersion; thicknessNm: number }[], growing: Dispersion): ChipSpectrum | null => {
    if (spectral === undefined || spectralGridNm === undefined) return null;
    return buildChipSpectrum({
      ...chipFaces(recipe, layer),
      below,
      growing,
      angleDeg: layer.angleDeg,
      signal: layer.signal,
      gridNm: spectralGridNm,
      resolutionNm: spectral.resolutionNm,
    });
  };
  let chipSpectrum: ChipSpectrum | null = null;
  if (spectral !== undefined) {
    // Every material on every chip must have data over the grid and its slit: refused now, not mid-run.
    for (const [i, chip] of recipe.chips.entries()) {
      const onChip = recipe.layers.filter((l) => l.chip === i);
      const layer = onChip[0] ?? firstLayer;
      try {
        chipSpectrumOf(layer, onChip.map((l) => ({ dispersion: (materials.get(l.materialName) as MaterialState).dispersion, thicknessNm: 0 })), chip.substrate);
      } catch (error) {
        throw new RangeError(`the profile's spectral monitor cannot see chip ${i + 1}: ${(error as Error).message}`, { cause: error });
      }
    }
    chipSpectrum = chipSpectrumOf(firstLayer, [], (materials.get(firstLayer.materialName) as MaterialState).dispersion);
  }

  function chipNmOf(layer: LayerState): number {
    return layer.partNm * layer.source.chipFactor;
  }

  /** Completed slices of `layer` (each `sliceNm` thick) and the thickness of the top one. */
  function sliceSplit(layer: LayerState): { full: number; topNm: number } {
    const chipNm = chipNmOf(layer);
    if (!Number.isFinite(layer.sliceNm)) return { full: 0, topNm: chipNm };
    let full = Math.floor(chipNm / layer.sliceNm);
    if (full * layer.sliceNm > chipNm) full--;
    return { full, topNm: chipNm - full * layer.sliceNm };
  }

  function sliceDispersion(layer: LayerState, j: number): Dispersion {
    const material = layer.source.material;
    if (!Number.isFinite(layer.sliceNm)) return material.dispersion;
    while (layer.sliceDispersions.length <= j) {
      const i = layer.sliceDispersions.length;
      // n(z) = n_true·(1 + p·(z/d_planned − ½)), sampled at the slice centres
      const grade = 1 + (material.inhomogeneityPercent / 100) * ((i + 0.5) / INHOMOGENEITY_SLICES - 0.5);
      layer.sliceDispersions.push(frozen(scaledDispersion(material.design, material.indexFactor * grade, material.extraK), material.design));
    }
    return layer.sliceDispersions[j] as Dispersion;
  }

  function slicesOf(layer: LayerState): TrueSlice[] {
    const { full, topNm } = sliceSplit(layer);
    const out: TrueSlice[] = [];
    for (let j = 0; j < full; j++) out.push({ dispersion: sliceDispersion(layer, j), chipNm: layer.sliceNm });
    out.push({ dispersion: sliceDispersion(layer, full), chipNm: topNm });
    return out;
  }

  function rebuildMonitor(layer: LayerState): void {
    const below: { dispersion: Dispersion; thicknessNm: number }[] = [];
    for (const other of layers) {
      if (other === layer) break;
      if (other.chip !== layer.chip) continue;
      for (const s of slicesOf(other)) below.push({ dispersion: s.dispersion, thicknessNm: s.chipNm });
    }
    const { full } = sliceSplit(layer);
    for (let j = 0; j < full; j++) below.push({ dispersion: sliceDispersion(layer, j), thicknessNm: layer.sliceNm });
    monitorLayer = layer;
    monitorSlices = full;
    monitor = layerMonitor(recipe, layer.recipe, below, sliceDispersion(layer, full));
    chipSpectrum = chipSpectrumOf(layer.recipe, below, sliceDispersion(layer, full));
  }

  /** The growing slice's thickness on the chip, rebuilding the monitor when a slice completed. */
  function monitorThicknessNm(): number {
    if (monitorLayer === null) return 0;
    const { full, topNm } = sliceSplit(monitorLayer);
    if (full !== monitorSlices) rebuildMonitor(monitorLayer);
    return topNm;
  }

  function monitorSignal(): number {
    const thicknessNm = monitorThicknessNm(); // first: it may rebuild `monitor`
    return monitor.signalAt(thicknessNm);
  }

  // ---- time
  function opticalTimeS(i: number): number {
    return i / opticalRateHz;
  }
  function crystalTimeS(j: number): number {
    return j / crystalRateHz;
  }
  function firstOpticalAtOrAfter(t: number): number {
    let i = Math.ceil(t * opticalRateHz);
    while (i > 0 && opticalTimeS(i - 1) >= t) i--;
    while (opticalTimeS(i) < t) i++;
    return i;
  }

  /** Moves the state (deposition, heat load) from `timeS` to `t` with no event between. */
  function moveTo(t: number): void {
    if (!(t > timeS)) return;
    if (growing !== null) {
      growing.partNm += growing.source.rate.integrate(timeS, t);
      growing.crystal.thicknessNm = growing.partNm * growing.source.crystalFactor;
    }
    const drive = openShutters > 0 ? 1 : 0;
    const tau = xtl.temperatureTimeConstantS;
    heat = tau > 0 ? drive + (heat - drive) * Math.exp(-(t - timeS) / tau) : drive;
    timeS = t;
  }

  function applyMove(move: PendingMove): void {
    const source = move.source;
    const t = move.moveS;
    move.done = true;
    if (move.action === 'open') {
      if (!source.open) {
        source.open = true;
        openShutters++;
        source.rate.open(t);
      }
      let layer = layers[layers.length - 1];
      if (layer === undefined || layer.number !== move.layer) {
        const settings = recipe.layers[move.layer - 1] as LayerRecipe;
        const inhomogeneous = source.material.inhomogeneityPercent !== 0;
        layer = {
          number: move.layer,
          recipe: settings,
          source,
          chip: settings.chip,
          partNm: 0,
          openS: t,
          closeS: Number.NaN,
          endedBy: null,
          openings: 0,
          crystal: { thicknessNm: 0, densityGPerCm3: source.material.densityGPerCm3, zRatio: source.material.zRatio },
          sliceNm: inhomogeneous ? (settings.targetNm * settings.chipRatio) / INHOMOGENEITY_SLICES : Number.POSITIVE_INFINITY,
          sliceDispersions: [],
        };
        layers.push(layer);
        crystalStack.push(layer.crystal);
      }
      if (growing !== layer) {
        if (growing !== null) {
          growing.closeS = t;
          growing.endedBy = 'next-open';
        }
        layer.openings++;
        layer.closeS = Number.NaN;
        layer.endedBy = null;
        growing = layer;
      }
      if (monitorLayer !== layer) rebuildMonitor(layer);
    } else {
      if (source.open) {
        source.open = false;
        openShutters--;
      }
      if (growing !== null && growing.source === source) {
        growing.closeS = t;
        growing.endedBy = 'close';
        growing = null;
      }
    }
    acks.push({ kind: 'shutter-ack', action: move.action, source: source.name, timeS: t });
  }

  function emitOptical(t: number, sink: (reading: Reading) => void): void {
    const noise = noiseSigma > 0 ? noiseSigma * opticalNoise.gaussian() : 0;
    // Spikes and noise are drawn for every sample, dropped or not, so that a gap does not shift them.
    let spike = 0;
    if (nextSpikeS <= t) {
      while (nextSpikeS <= t) nextSpikeS += spikeStream.exponential() / spikePerS;
      spike = spikeStream.uniform() < 0.5 ? -spikeSize : spikeSize;
    }
    const gapEnd = dropouts.endOfWindowAt(t);
    if (gapEnd === gapEnd) return; // inside a gap
    if (spike !== 0) spikeTimesS.push(t);
    const signal = monitorSignal();
    const value = (1 + gainPerS * t) * signal + offsetPerS * t + noise + spike;
    sink({ kind: 'reading', channel: 'optical', value, timeS: t, arrivalS: t });
  }

  function spectralTimeS(i: number): number {
    return i / (spectral as NonNullable<typeof spectral>).rateHz;
  }

  function emitSpectrum(t: number, sink: (spectrum: SpectrumReading) => void): void {
    const settings = spectral as NonNullable<typeof spectral>;
    const grid = spectralGridNm as Float64Array;
    const thicknessNm = monitorThicknessNm(); // first: it may rebuild the chip's spectrum
    const values = (chipSpectrum as ChipSpectrum).spectrumAt(new Float64Array(grid.length), thicknessNm);
    const stray = settings.strayLightPercent / 100;
    const gain = 1 + (settings.gainDriftPercentPerHour / 100 / 3600) * t;
    const offset = (settings.offsetDriftPercentPerHour / 100 / 3600) * t;
    const sigma = settings.noisePercent / 100;
    for (let i = 0; i < values.length; i++) {
      const noise = sigma > 0 ? sigma * spectralNoise.gaussian() : 0;
      values[i] = (gain * ((values[i] as number) + stray)) / (1 + stray) + offset + noise;
    }
    sink({ kind: 'spectrum', channel: 'spectral', wavelengthsNm: grid, values, timeS: t, arrivalS: t });
  }

  function emitCrystal(t: number, sink: (reading: Reading) => void): void {
    const fMass = stackFrequencyHz(f0, crystalStack);
    if (failAt < 1 && crystalLifeUsed(f0, fMass, fMin) >= failAt) {
      failedAtS = t;
      return;
    }
    const noise = crystalSigma > 0 ? crystalSigma * crystalNoise.gaussian() : 0;
    const jump = hop !== undefined && t >= hop.atS ? hop.jumpHz : 0;
    const value = fMass + xtl.temperatureShiftHz * heat + noise + jump;
    sink({ kind: 'reading', channel: 'crystal', value, timeS: t, arrivalS: t });
  }

  function refuse(command: ShutterCommand, reason: string): void {
    refused.push({ command, reason });
  }

  return {
    get timeS() {
      return timeS;
    },

    get spectralGridNm() {
      return spectralGridNm;
    },

    advance(untilS: number, sink: (reading: Reading) => void, spectra?: (spectrum: SpectrumReading) => void): void {
      if (!Number.isFinite(untilS)) throw new RangeError(`advance needs a finite time, got ${untilS}`);
      for (;;) {
        const next = pending[0];
        const tMove = next === undefined ? Number.POSITIVE_INFINITY : next.moveS;
        const tOpt = opticalTimeS(optIndex);
        const tXtl = failedAtS === failedAtS ? Number.POSITIVE_INFINITY : crystalTimeS(xtlIndex);
        const tReading = tMove < tOpt ? (tMove < tXtl ? tMove : tXtl) : tOpt < tXtl ? tOpt : tXtl;
        const tSpec = spectral === undefined ? Number.POSITIVE_INFINITY : spectralTimeS(spectralIndex);
        const t = tSpec < tReading ? tSpec : tReading;
        if (t > untilS) break;
        moveTo(t);
        if (tMove === t) {
          pending.shift();
          applyMove(next as PendingMove);
        } else if (tOpt === t) {
          optIndex++;
          dropouts.commit(t);
          emitOptical(t, sink);
        } else if (tXtl === t) {
          xtlIndex++;
          emitCrystal(t, sink);
        } else {
          spectralIndex++;
          if (spectra) emitSpectrum(t, spectra);
        }
      }
      moveTo(untilS);
    },

    nextReadingTimeS(): number {
      let i = optIndex;
      for (;;) {
        const t = opticalTimeS(i);
        const end = dropouts.endOfWindowAt(t);
        if (end !== end) break;
        i = firstOpticalAtOrAfter(end);
      }
      const tOpt = opticalTimeS(i);
      const tXtl = failedAtS === failedAtS ? Number.POSITIVE_INFINITY : crystalTimeS(xtlIndex);
      return Math.min(tOpt, tXtl);
    },

    command(cmd: ShutterCommand): void {
      if (!Number.isFinite(cmd.timeS)) return refuse(cmd, 'the command time is not a finite number');
      const source = sources.get(cmd.source);
      if (source === undefined) return refuse(cmd, `no source "${cmd.source}" in this chamber`);
      if (!Number.isInteger(cmd.layer) || cmd.layer < 1 || cmd.layer > recipe.layers.length) {
        return refuse(cmd, `the recipe has layers 1–${recipe.layers.length}, not ${cmd.layer}`);
      }
      if (cmd.action === 'open') {
        if (lastCommanded !== null && cmd.layer < lastCommanded.layer) {
          return refuse(cmd, `layer ${cmd.layer} comes before layer ${lastCommanded.layer}, already opened`);
        }
        if (lastCommanded !== null && cmd.layer === lastCommanded.layer && source !== lastCommanded.source) {
          return refuse(cmd, `layer ${cmd.layer} was opened with ${lastCommanded.source.name}, not ${source.name}`);
        }
        lastCommanded = { layer: cmd.layer, source };
      }
      const effectiveS = Math.max(cmd.timeS, timeS);
      const delayS = source.settings.shutterDelayS ?? (recipe.layers[cmd.layer - 1] as LayerRecipe).shutterDelayS;
      const sigma = source.settings.shutterJitterS;
      let jitterS = 0;
      if (sigma > 0) {
        jitterS = sigma * source.jitter.gaussian();
        jitterS = jitterS > 3 * sigma ? 3 * sigma : jitterS < -3 * sigma ? -3 * sigma : jitterS;
      }
      const moveS = Math.max(effectiveS + Math.max(0, delayS + jitterS), source.lastMoveS);
      source.lastMoveS = moveS;
      const move: PendingMove = { source, action: cmd.action, layer: cmd.layer, commandS: effectiveS, moveS, done: false };
      moves.push(move);
      let at = pending.length;
      while (at > 0 && (pending[at - 1] as PendingMove).moveS > moveS) at--;
      pending.splice(at, 0, move);
    },

    takeAcks(): ShutterAck[] {
      const out = acks;
      acks = [];
      return out;
    },

    truth(): ChamberTruth {
      const settingsLayer = monitorLayer === null ? firstLayer : monitorLayer.recipe;
      const probe = { n: 0, k: 0 };
      const materialRecord: Record<string, TrueMaterial> = {};
      for (const [name, m] of materials) {
        materialRecord[name] = {
          dispersion: m.dispersion,
          indexFactor: m.indexFactor,
          extraK: m.extraK,
          inhomogeneityPercent: m.inhomogeneityPercent,
          densityGPerCm3: m.densityGPerCm3,
          zRatio: m.zRatio,
        };
      }
      const sourceRecord: Record<string, TrueSource> = {};
      for (const [name, s] of sources) {
        sourceRecord[name] = {
          plannedRateNmPerS: s.plannedRateNmPerS,
          chipRatio: s.chipRatio,
          toolingFactor: s.toolingFactor,
          settings: { ...s.settings },
          shutterOpen: s.open,
        };
      }
      return {
        timeS,
        layers: layers.map((l) => {
          indexAt(probe, l.source.material.dispersion, l.recipe.wavelengthNm);
          return {
            number: l.number,
            material: l.source.name,
            chip: l.chip,
            growing: l === growing,
            partNm: l.partNm,
            chipNm: chipNmOf(l),
            crystalNm: l.crystal.thicknessNm,
            openS: l.openS,
            closeS: l.closeS === l.closeS ? l.closeS : null,
            endedBy: l.endedBy,
            openings: l.openings,
            wavelengthNm: l.recipe.wavelengthNm,
            nTrue: probe.n,
            kTrue: probe.k,
            slices: slicesOf(l),
          };
        }),
        materials: materialRecord,
        sources: sourceRecord,
        moves: moves.map((m) => ({ source: m.source.name, action: m.action, layer: m.layer, commandS: m.commandS, moveS: m.moveS, done: m.done })),
        refused: refused.map((r) => ({ ...r })),
        monitor: {
          layer: settingsLayer.number,
          chip: settingsLayer.chip,
          signal: monitorSignal(),
          gain: 1 + gainPerS * timeS,
          offset: offsetPerS * timeS,
          spikeTimesS: [...spikeTimesS],
          dropouts: dropouts.windowsBefore(timeS),
        },
        crystal: {
          bareFrequencyHz: f0,
          massFrequencyHz: stackFrequencyHz(f0, crystalStack),
          heatLoad: heat,
          temperatureShiftHz: xtl.temperatureShiftHz * heat,
          failedAtS: failedAtS === failedAtS ? failedAtS : null,
        },
      };
    },
  };
}

/** The chamber's own dispersions are frozen (truth hands them out); the design's is left as it is. */
function frozen(dispersion: Dispersion, design: Dispersion): Dispersion {
  return dispersion === design ? dispersion : deepFreeze(dispersion);
}

/**
 * Gaps in the optical readings: the listed windows and a Poisson process of random ones (each
 * `durationS` long, the time from one's end to the next start exponential), generated lazily
 * from their own stream so that looking ahead never changes them.
 */
class DropoutSchedule {
  private readonly listed: (readonly [number, number])[];
  private readonly random: [number, number][] = [];
  private listedFrom = 0;
  private randomFrom = 0;
  private nextStartS: number;

  constructor(
    listed: readonly { atS: number; durationS: number }[],
    private readonly ratePerS: number,
    private readonly durationS: number,
    private readonly stream: RandomStream,
  ) {
    this.listed = listed.map((d) => [d.atS, d.atS + d.durationS] as const).sort((a, b) => a[0] - b[0]);
    this.nextStartS = ratePerS > 0 ? stream.exponential() / ratePerS : Number.POSITIVE_INFINITY;
  }

  /** The end of a window holding `t`, or NaN when `t` is in none. */
  endOfWindowAt(t: number): number {
    for (let i = this.listedFrom; i < this.listed.length; i++) {
      const w = this.listed[i] as readonly [number, number];
      if (w[0] > t) break;
      if (t < w[1]) return w[1];
    }
    while (this.nextStartS <= t) {
      const end = this.nextStartS + this.durationS;
      this.random.push([this.nextStartS, end]);
      this.nextStartS = end + this.stream.exponential() / this.ratePerS;
    }
    for (let i = this.randomFrom; i < this.random.length; i++) {
      const w = this.random[i] as [number, number];
      if (w[0] > t) break;
      if (t < w[1]) return w[1];
    }
    return Number.NaN;
  }

  /** No later query comes before `t`: windows over by then are dropped from the search. */
  commit(t: number): void {
    while (this.listedFrom < this.listed.length && (this.listed[this.listedFrom] as readonly [number, number])[1] <= t) this.listedFrom++;
    while (this.randomFrom < this.random.length && (this.random[this.randomFrom] as [number, number])[1] <= t) this.randomFrom++;
  }

  /** Every window begun at or before `t`, sorted by start. */
  windowsBefore(t: number): [number, number][] {
    this.endOfWindowAt(t);
    return [...this.listed, ...this.random]
      .filter((w) => w[0] <= t)
      .map((w) => [w[0], w[1]] as [number, number])
      .sort((a, b) => a[0] - b[0]);
  }
}

/**
 * A layer's true optical thickness n·d at its monitor wavelength against the design's
 * (the design index times `targetNm`), %: what optical monitoring controls, so index and chip
 * ratio errors show here and not as a cut's error. NaN for a layer never deposited.
 */
export function trueOpticalErrorPercent(layer: Pick<LayerRecipe, 'dispersion' | 'wavelengthNm'>, truth: TrueLayer | undefined, targetNm: number): number {
  if (!truth) return Number.NaN;
  const nDesign = indexAt({ n: 0, k: 0 }, layer.dispersion, truth.wavelengthNm).n;
  return 100 * ((truth.nTrue * truth.partNm) / (nDesign * targetNm) - 1);
}

/** The stack as it was really deposited on the parts: the design's media, true indices and thicknesses. */
export function trueStackSpec(recipe: ResolvedRecipe, truth: ChamberTruth): StackSpec {
  const design = recipe.design.stack;
  return {
    ...design,
    layers: design.layers.map((l, i) => ({
      dispersion: truth.materials[(recipe.layers[i] as { materialName: string }).materialName]?.dispersion ?? l.dispersion,
      thicknessNm: truth.layers[i]?.partNm ?? 0,
    })),
  };
}
