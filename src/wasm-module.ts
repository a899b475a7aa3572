/**
 * The compiled WebAssembly modules shipped beside the code that uses them (src/count/*.wasm,
 * src/pack/lookup-step.wasm: `npm run build:wasm`), compiled once per thread on first use, and an
 * instance of one over a memory of its own.
 */
import { readFileSync } from 'node:fs';
import { WASM_MEMORY_BYTES_MAX } from './limits.ts';

/** Which code runs a loop that has a WebAssembly and a JavaScript version: 'auto' = WebAssembly when
 *  it can be had; 'js' = JavaScript (tests compare the two). */
export type WasmEngine = 'auto' | 'js';

const PAGE_BYTES = 65536;

/** A function that gives the module at `url`, compiled the first time it is called, or the Error
 *  that kept it from being read or compiled (the caller then uses its JavaScript twin). */
export function wasmModuleAt(url: URL): () => WebAssembly.Module | Error {
  let compiled: WebAssembly.Module | Error | undefined;
  return () => {
    if (compiled === undefined) {
      try {
        compiled = new WebAssembly.Module(readFileSync(url));
      } catch (error) {
        compiled = error instanceof Error ? error : new Error(String(error));
      }
    }
    return compiled;
  };
}

/**
 * An instance of `module` over a fresh memory of at least `bytes` (whole pages, never grown, so no
 * view of it is ever detached, unless `growable`: then its owner may grow it up to
 * WASM_MEMORY_BYTES_MAX and must make its views again), or why there is none: the module did not load, the size is over
 * WASM_MEMORY_BYTES_MAX, or the process cannot reserve the memory (V8 reserves far more address space
 * than it holds: under `ulimit -v` 8 GB even a 640 KiB memory failed, a scratch script 2026-12-05).
 */
export function instanceWithMemory(module: WebAssembly.Module | Error, bytes: number, growable = false): { memory: WebAssembly.Memory; instance: WebAssembly.Instance } | Error {
  if (module instanceof Error) return new Error(`the WebAssembly module cannot be loaded: ${module.message}`);
  if (bytes > WASM_MEMORY_BYTES_MAX) return new Error(`${bytes} bytes are over the WebAssembly memory's ${WASM_MEMORY_BYTES_MAX}`);
  const pages = Math.ceil(bytes / PAGE_BYTES);
  try {
    const memory = new WebAssembly.Memory({ initial: pages, maximum: growable ? WASM_MEMORY_BYTES_MAX / PAGE_BYTES : pages });
    return { memory, instance: new WebAssembly.Instance(module, { env: { memory } }) };
  } catch (error) {
    return new Error(`no WebAssembly memory of ${bytes} bytes: ${(error as Error).message}`);
  }
}
