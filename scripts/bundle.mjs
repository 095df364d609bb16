/**
 * Bundles the compiled CLI (`dist/cli/main.js`, `dist/dataset/discover-worker.js`) into `dist/bundle/`
 * with esbuild: ESM, code splitting (commands load their engines on demand from `chunks/`), only the
 * native DuckDB binding left outside. Run by `npm run build:bundle` after `tsc`.
 *
 * Start-up is part of every run's wall time, so the bundle is cut for it:
 * - whitespace and comments are dropped: less text to read, decode and parse on every start, and the
 *   output is pure ASCII (comments were the only non-ASCII text), which Node decodes on its fast path;
 *   lines stay at most 1,000 characters so stack traces remain readable, and the source maps map back;
 * - zod's error messages in 40+ languages (`z.locales`, ~350 kB parsed by every command that reads a
 *   config) are replaced by the English one, the only one the tool uses (zod sets it as its default).
 *
 * Deterministic: same inputs, same files (esbuild's output and chunk hashes depend only on them).
 */
import { rmSync } from 'node:fs'
import path from 'node:path'
import { build } from 'esbuild'

const outdir = 'dist/bundle'

/** Resolves zod's `locales/index.js` to a module that exports only `en`. */
const englishOnlyZod = {
  name: 'zod-english-only',
  setup(b) {
    b.onResolve({ filter: /\/locales\/index\.js$/ }, (args) => {
      if (!/[\\/]node_modules[\\/]zod[\\/]/.test(args.importer)) return undefined
      return { path: path.join(path.dirname(args.importer), args.path), namespace: 'zod-locales' }
    })
    b.onLoad({ filter: /.*/, namespace: 'zod-locales' }, (args) => ({
      contents: `export { default as en } from ${JSON.stringify(path.join(path.dirname(args.path), 'en.js'))}\n`,
      resolveDir: path.dirname(args.path),
      loader: 'js',
    }))
  },
}

rmSync(outdir, { recursive: true, force: true })
await build({
  entryPoints: { slopeshift: 'dist/cli/main.js', 'discover-worker': 'dist/dataset/discover-worker.js' },
  bundle: true,
  platform: 'node',
  format: 'esm',
  target: 'node20',
  splitting: true,
  outdir,
  entryNames: '[name]',
  chunkNames: 'chunks/[name]-[hash]',
  external: ['@duckdb/node-bindings'],
  sourcemap: true,
  minifyWhitespace: true,
  lineLimit: 1000,
  legalComments: 'none',
  logLevel: 'warning',
  banner: {
    js: "import { createRequire as __ssRequire } from 'node:module'; const require = __ssRequire(import.meta.url);",
  },
  plugins: [englishOnlyZod],
})
