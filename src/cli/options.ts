/** Option parsing shared by commands: sizes like `2GiB`, counts, and their range checks. */
import bytes from 'bytes-iec';
import { QuernError } from '../errors.ts';

/** Parses a size such as `512MiB`, `2GiB`, `1.5GB` or a plain number of bytes. */
export function parseSize(text: string | number, option: string): number {
  const value = typeof text === 'number' ? text : bytes.parse(String(text).trim());
  if (value === null || !Number.isFinite(value) || value <= 0) {
    throw new QuernError('config', `${option} expects a size such as 512MiB or 2GiB, got '${text}'`);
  }
  return Math.floor(value);
}

/** Checks that `value` is an integer within [min, max]; names the option in the message. */
export function intInRange(value: unknown, option: string, min: number, max: number): number {
  const n = Number(value);
  if (!Number.isInteger(n) || n < min || n > max) {
    throw new QuernError('config', `${option} must be a whole number from ${min} to ${max}, got '${String(value)}'`);
  }
  return n;
}

export function formatBytes(n: number): string {
  return bytes.format(n, { mode: 'binary', decimalPlaces: 1 }) ?? `${n} B`;
}
