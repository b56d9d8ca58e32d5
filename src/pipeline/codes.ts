/**
 * The one registry of codes for input faults and alerts: each has a stable code, a severity and
 * a sentence an operator can act on. A test checks that every code used is documented here.
 */
import type { FaultCode } from './types.ts';

export type Severity = 'info' | 'warning' | 'critical';

export type AlertCode =
  | `fault-${FaultCode}`
  | 'optical-lost'
  | 'crystal-lost'
  | 'crystal-fallback'
  | 'time-fallback'
  | 'thickness-ceiling'
  | 'time-ceiling'
  | 'rate-out-of-band'
  | 'mode-restored'
  | 'optical-back-late'
  | 'crystal-changed'
  | 'crystal-implausible'
  | 'optical-implausible'
  | 'clock-rebased'
  | 'shutter-no-ack'
  | 'shutter-not-sent'
  | 'operator-cut'
  | 'operator-skip'
  | 'operator-abort'
  | 'close-unconfirmed'
  | 'close-confirmed'
  | 'operator-confirmed-close'
  | 'source-lost'
  | 'source-restored'
  | 'journal-write-failed'
  | 'journal-recovered'
  | 'broker-unreachable'
  | 'broker-restored';

export const ALERTS: Readonly<Record<AlertCode, { severity: Severity; sentence: string }>> = {
  'fault-not-a-number': { severity: 'warning', sentence: 'A reading was not a number and was not used.' },
  'fault-out-of-range': { severity: 'warning', sentence: 'A reading lay outside its channel’s range and was not used.' },
  'fault-time-backwards': { severity: 'warning', sentence: 'A reading’s time ran backwards and it was not used.' },
  'fault-line-too-long': { severity: 'warning', sentence: 'An instrument line was too long and was dropped.' },
  'fault-garbled': { severity: 'warning', sentence: 'An instrument line could not be read and was not used.' },
  'fault-unknown-channel': { severity: 'warning', sentence: 'A line named a channel this chamber does not have.' },
  'fault-implausible-jump': { severity: 'warning', sentence: 'A reading jumped further than any deposition can from the recent readings and was not used.' },
  'fault-time-jump': { severity: 'warning', sentence: 'A reading’s time lay too far from the run clock’s present and it was not used.' },
  'fault-spectrum-length': { severity: 'warning', sentence: 'A spectrum had not as many values as its wavelength grid and was not used.' },
  'fault-spectrum-not-finite': { severity: 'warning', sentence: 'A spectrum held a value that was not a finite number and was not used.' },
  'fault-spectrum-out-of-range': { severity: 'warning', sentence: 'A spectrum held a value far outside 0–100 % and was not used.' },
  'fault-grid-unknown': { severity: 'warning', sentence: 'A spectrum came before its wavelength grid was known (no header yet, none in the chamber file) and was not used.' },
  'fault-grid-invalid': { severity: 'warning', sentence: 'A wavelength header was not a strictly increasing list of wavelengths and was not used.' },
  'fault-grid-changed': { severity: 'warning', sentence: 'The spectral monitor sent a wavelength grid other than the one in use: it was not taken, and the spectra on it are refused.' },
  'optical-lost': { severity: 'critical', sentence: 'The optical monitor has gone quiet during an optically cut layer.' },
  'crystal-lost': { severity: 'critical', sentence: 'The crystal monitor has gone quiet (crystal failed or disconnected).' },
  'crystal-fallback': { severity: 'warning', sentence: 'The layer is now cut on the crystal thickness instead of its planned mode.' },
  'time-fallback': { severity: 'critical', sentence: 'The layer is now cut on time from the planned rate: no monitor is usable.' },
  'thickness-ceiling': { severity: 'critical', sentence: 'The layer reached its thickness ceiling and was cut.' },
  'time-ceiling': { severity: 'critical', sentence: 'The layer ran past its time ceiling and was cut.' },
  'rate-out-of-band': { severity: 'warning', sentence: 'The deposition rate is outside its allowed band.' },
  'mode-restored': { severity: 'info', sentence: 'The layer’s own monitor is answering again: the layer is back on its planned cut.' },
  'optical-back-late': {
    severity: 'info',
    sentence: 'The optical monitor is answering again, with too little of the layer left for its cut to do better: the crystal, calibrated by the layer’s fit, keeps it.',
  },
  'crystal-changed': { severity: 'warning', sentence: 'A fresh crystal has come into use: the layer’s thickness carries on from where the old crystal left it.' },
  'crystal-implausible': {
    severity: 'critical',
    sentence: 'The crystal’s readings keep jumping as no deposition can: it is not used for the rest of the layer.',
  },
  'optical-implausible': {
    severity: 'critical',
    sentence: 'The optical monitor’s readings keep jumping as no coating can: it is not used for the rest of the layer.',
  },
  'clock-rebased': {
    severity: 'warning',
    sentence: 'An instrument’s clock jumped and stayed there: its readings are placed on the run clock from its present on.',
  },
  'shutter-no-ack': { severity: 'critical', sentence: 'A shutter did not confirm a command in time: check it by hand.' },
  'shutter-not-sent': { severity: 'critical', sentence: 'A shutter command could not be sent (no connection, or no command for that source): act by hand.' },
  'operator-cut': { severity: 'info', sentence: 'The operator cut the layer.' },
  'operator-skip': { severity: 'warning', sentence: 'The operator skipped the layer.' },
  'operator-abort': { severity: 'critical', sentence: 'The operator aborted the run; every shutter was asked to close.' },
  'close-unconfirmed': {
    severity: 'critical',
    sentence: 'A shutter’s close is not confirmed: the next layer waits (the close is being re-sent). Check the shutter by hand; resume once it is shut.',
  },
  'close-confirmed': { severity: 'info', sentence: 'The shutter’s close is confirmed: the run goes on.' },
  'operator-confirmed-close': { severity: 'warning', sentence: 'The operator resumed with a shutter’s close unconfirmed, vouching that it is shut.' },
  'source-lost': { severity: 'critical', sentence: 'An instrument connection was lost; fringe is reconnecting.' },
  'source-restored': { severity: 'info', sentence: 'An instrument connection is back.' },
  'journal-write-failed': {
    severity: 'critical',
    sentence: 'The journal cannot be written (disk full or failing): the run goes on, its lines are held in memory and retried; free space now.',
  },
  'journal-recovered': { severity: 'info', sentence: 'The journal is being written again; what was held back is on disk.' },
  'broker-unreachable': { severity: 'info', sentence: 'The plant’s message broker cannot be reached: the run goes on, its messages wait in a bounded queue.' },
  'broker-restored': { severity: 'info', sentence: 'The plant’s message broker is reachable again: the messages held back are being sent.' },
};
