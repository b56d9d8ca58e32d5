/**
 * Loads the reference data: thin-film cases computed with tmm 0.2.0 (S. Byrnes),
 * shared/reference/tmm-cases.json, copied into test/fixtures/reference/ (see its README).
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';

export interface ReferenceLayer { n: number; k: number; thicknessNm: number }
export interface ReferenceCase {
  id: string;
  family: string;
  description: string;
  incidentIndex: number;
  /** layers[0] touches the incident medium. */
  layers: ReferenceLayer[];
  substrate: { n: number; k: number };
  substrateTreatment: 'semi-infinite' | 'incoherent-thick';
  substrateThicknessNm?: number;
  exitIndex?: { n: number; k: number };
  wavelengthNm: number;
  angleDeg: number;
  polarization: 's' | 'p';
  sweepLayerIndex?: number;
  quarterWaveNm?: number;
  expected: Record<string, unknown>;
}

export const referenceDir = fileURLToPath(new URL('../fixtures/reference/', import.meta.url));
/** The team's shared copy beside the repository, when present. */
export const sharedReferenceDir = fileURLToPath(new URL('../../../shared/reference/', import.meta.url));

export function loadTmmCases(): ReferenceCase[] {
  const file = JSON.parse(readFileSync(`${referenceDir}tmm-cases.json`, 'utf8')) as { cases: ReferenceCase[] };
  return file.cases;
}
