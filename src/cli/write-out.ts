/** Output of commands that print while they work (per-line records, answers to queries). */

/** Writes `text`, waiting for the stream to drain when its buffer is full (a pipe read slowly). */
export function writeOut(out: NodeJS.WritableStream, text: string): Promise<void> | void {
  if (out.write(text)) return;
  return new Promise((resolve) => out.once('drain', () => resolve()));
}
