/**
 * Progress of long work. On a terminal: a bar with bytes read of total (or tasks done), tokens/s,
 * elapsed time, ETA and memory in use (cli-progress); when the total is not known (standard input),
 * the bytes read, rate, elapsed time and memory, without a bar, percentage or ETA. Not on a
 * terminal: one summary line per phase. `--quiet`: nothing.
 */
import cliProgress from 'cli-progress';
import type { ProgressSink } from '../job/context.ts';
import { formatBytes } from './options.ts';

function formatRate(n: number): string {
  if (n >= 1e6) return `${(n / 1e6).toFixed(2)}M`;
  if (n >= 1e3) return `${(n / 1e3).toFixed(1)}k`;
  return `${Math.round(n)}`;
}

export function makeProgress(mode: 'auto' | 'quiet', stream: NodeJS.WriteStream = process.stderr): ProgressSink {
  if (mode === 'quiet') return { start() {}, update() {}, stop() {} };
  let label = '';
  let total: number | undefined;
  let done = 0;
  let tokens = 0;
  let started = 0;
  let unit: 'bytes' | 'tasks' = 'bytes';
  let items = 'tokens';
  const amount = (n: number): string => (unit === 'bytes' ? formatBytes(n) : String(n));
  if (!stream.isTTY) {
    return {
      start(l, t, u = 'bytes', i = 'tokens') { label = l; total = t; unit = u; items = i; done = 0; tokens = 0; started = Date.now(); },
      update(d, k) { done += d; tokens += k; },
      stop() {
        const seconds = Math.max((Date.now() - started) / 1000, 1e-3);
        const rate = tokens > 0 ? `, ${formatRate(tokens)} ${items} (${formatRate(tokens / seconds)} ${items}/s)` : '';
        const of = total === undefined ? '' : ` of ${amount(total)}`;
        stream.write(`quern: ${label}: ${amount(done)}${of}${rate} in ${seconds.toFixed(1)} s\n`);
      },
    };
  }
  let bar: cliProgress.SingleBar | undefined;
  const payload = () => {
    const seconds = Math.max((Date.now() - started) / 1000, 1e-3);
    return { done: amount(done), all: amount(total ?? 0), rate: formatRate(tokens / seconds), rss: formatBytes(process.memoryUsage.rss()) };
  };
  return {
    start(l, t, u = 'bytes', i = 'tokens') {
      label = l; total = t; unit = u; items = i; done = 0; tokens = 0; started = Date.now();
      // Without a total, cli-progress would show 100% and an ETA of 0 as soon as anything is done.
      const format = total === undefined
        ? `${label} | {done} ${unit === 'bytes' ? 'read' : 'done'} | {rate} ${items}/s | {duration_formatted} | {rss} in use`
        : `${label} [{bar}] {percentage}% | {done} of {all} | {rate} ${items}/s | {duration_formatted}, ETA {eta_formatted} | {rss} in use`;
      bar = new cliProgress.SingleBar({
        stream,
        format,
        hideCursor: true,
        etaBuffer: 50,
        fps: 5,
      }, cliProgress.Presets.shades_classic);
      bar.start(Math.max(total ?? 0, 1), 0, payload());
    },
    update(d, k) {
      done += d; tokens += k;
      bar?.update(done, payload());
    },
    stop() { bar?.stop(); bar = undefined; },
  };
}
