/**
 * A compiled WebAssembly module shipped beside the code that uses it (src/count/*.wasm,
 * src/pack/lookup-step.wasm: `npm run build:wasm`), compiled once per thread on first use.
 */
import { readFileSync } from 'node:fs';

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
