/**
 * The progress display with a known total (a bar, percentage and ETA) and without one (standard
 * input: the bytes read so far, no percentage or ETA), on a terminal and as the summary line
 * written elsewhere.
 */
import { Writable } from 'node:stream';
import { describe, expect, test } from 'vitest';
import { makeProgress } from '../../src/cli/progress.ts';

/** A stream that records what is written to it, a terminal 200 columns wide or not. */
function capture(isTTY: boolean): { stream: NodeJS.WriteStream; written: () => string } {
  let text = '';
  const stream = new Writable({ write(chunk, _encoding, done) { text += String(chunk); done(); } }) as unknown as NodeJS.WriteStream;
  Object.assign(stream, { isTTY, columns: 200 });
  return { stream, written: () => text };
}

describe('progress', () => {
  test('on a terminal: a bar with percentage and ETA when the total is known; the bytes read, without them, when it is not', () => {
    const known = capture(true);
    const bar = makeProgress('auto', known.stream);
    bar.start('scoring', 4 << 20);
    bar.update(1 << 20, 100);
    bar.stop();
    expect(known.written()).toMatch(/scoring \[.*\] 25% \| 1(\.0)? ?MiB of 4(\.0)? ?MiB \| .* ETA /);

    const unknown = capture(true);
    const reading = makeProgress('auto', unknown.stream);
    reading.start('scoring', undefined);
    reading.update(3 << 20, 100);
    reading.stop();
    const shown = unknown.written();
    expect(shown).toMatch(/scoring \| 3(\.0)? ?MiB read \| [\d.]+[kM]? tokens\/s \| /);
    expect(shown).not.toMatch(/%|ETA| of /);
  });

  test('not on a terminal: one summary line, "of" the total only when it is known', () => {
    const known = capture(false);
    const line = makeProgress('auto', known.stream);
    line.start('scoring', 2048);
    line.update(1024, 7);
    line.stop();
    expect(known.written()).toMatch(/^quern: scoring: 1(\.0)? ?KiB of 2(\.0)? ?KiB, 7 tokens \(.*\) in [\d.]+ s\n$/);

    const unknown = capture(false);
    const reading = makeProgress('auto', unknown.stream);
    reading.start('scoring', undefined);
    reading.update(1024, 7);
    reading.stop();
    expect(unknown.written()).toMatch(/^quern: scoring: 1(\.0)? ?KiB, 7 tokens \(.*\) in [\d.]+ s\n$/);
  });
});
