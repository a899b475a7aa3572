#!/bin/sh
':' //; case "${QUERN_HUGE_PAGES:-1}:${GLIBC_TUNABLES:-}" in 0:*|*glibc.malloc.hugetlb*) ;; *) GLIBC_TUNABLES="${GLIBC_TUNABLES:+$GLIBC_TUNABLES:}glibc.malloc.hugetlb=1"; export GLIBC_TUNABLES;; esac; exec node "$0" "$@"
// The line above is for the shell: run as a program (`quern`, `./bin/quern.js`), this file first
// starts Node with glibc's transparent-huge-page tunable, so that the large typed arrays of the
// counters, the estimate's tables and the model's sections sit on 2 MiB pages (one TLB entry then
// covers 2 MiB instead of 4 KiB; DEVELOPERS.md "Huge pages" has what it measured to give).
// QUERN_HUGE_PAGES=0, or a GLIBC_TUNABLES that already sets glibc.malloc.hugetlb, leaves it as it is;
// elsewhere than glibc on Linux the variable means nothing. Node itself reads the line as a string
// and a comment: `node bin/quern.js` runs without the tunable.
//
// Then it runs the JavaScript that `npm run build` compiled into dist/ (npm ci and npm install run
// the build), but only while src/ is exactly what it was compiled from (the stamp of
// bin/source-stamp.mjs); otherwise, or with QUERN_FROM_SOURCE=1, the TypeScript sources through
// tsx's loader, which starts more slowly (`npm run bench:startup`: `quern --help` 0.25–0.28 s
// compiled against 0.49–0.59 s through tsx).
import { fileURLToPath } from 'node:url';
import { builtFrom } from './source-stamp.mjs';

const compiled = process.env.QUERN_FROM_SOURCE !== '1' && builtFrom(fileURLToPath(new URL('../dist', import.meta.url)), fileURLToPath(new URL('../src', import.meta.url)));
if (compiled) {
  await import('../dist/cli/main.js');
} else {
  const { register } = await import('tsx/esm/api');
  register();
  await import('../src/cli/main.ts');
}
