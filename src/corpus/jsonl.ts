/**
 * JSONL records: parse one line (stream-json's per-line JSONL parser) and take its text field.
 */
import { jsonlParser } from 'stream-json/jsonl/parser.js';
import { assert } from '../errors.ts';

/** Why a record gave no text. `reason` is a short phrase for messages and the report. */
export class RecordProblem {
  constructor(readonly reason: string) {}
}

/** Parses one non-blank JSONL line and returns the string at the text field, or the problem. */
export type RecordReader = (line: string) => string | RecordProblem;

/**
 * Makes a reader of records whose text is at `textField` (e.g. ['body', 'text'] for `body.text`).
 * The value there must be a string; a missing field, a value of another type, a top-level value
 * that is not an object, and malformed JSON are problems, never exceptions.
 *
 * @param textField a non-empty path of object keys.
 */
export function makeRecordReader(textField: string[]): RecordReader {
  assert(textField.length > 0, 'textField names at least one key');
  const parse = jsonlParser();
  const fieldName = textField.join('.');
  return (line) => {
    let item;
    try {
      item = parse(line);
    } catch (cause) {
      return new RecordProblem(`malformed JSON: ${(cause as Error).message}`);
    }
    if (typeof item === 'symbol') return new RecordProblem('malformed JSON: empty record');
    let value: unknown = item.value;
    for (const key of textField) {
      if (value === null || typeof value !== 'object' || Array.isArray(value) || !Object.hasOwn(value, key)) {
        return new RecordProblem(`field "${fieldName}" is missing`);
      }
      value = (value as Record<string, unknown>)[key];
    }
    if (typeof value !== 'string') return new RecordProblem(`field "${fieldName}" is ${describeJsonType(value)}, not a string`);
    return value;
  };
}

function describeJsonType(value: unknown): string {
  if (value === null) return 'null';
  if (Array.isArray(value)) return 'an array';
  if (typeof value === 'object') return 'an object';
  return `a ${typeof value}`;
}
