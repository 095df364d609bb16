/**
 * Bundles the compiled CLI into `dist/bundle/` with esbuild (run by `npm run build:bundle` after `tsc`):
 * - `cli.cjs`: `dist/cli/main.js` and everything it loads as one CommonJS script (commands still
 *   evaluate their engines only on demand), only the native DuckDB binding left outside;
 * - `slopeshift.js`: the entry (`dist/cli/launch.js`), which runs `cli.cjs` with a V8 code cache and
 *   knows it by its content hash (`__SLOPESHIFT_BUNDLE_ID__`), see src/cli/code-cache.ts;
 * - `discover-worker.js`: the file-discovery worker thread (ESM).
 *
 * Start-up is part of every run's wall time, so the bundle is cut for it:
 * - whitespace and comments are dropped: less text to read, decode and parse on every start, and the
 *   output is pure ASCII (comments were the only non-ASCII text), which Node decodes on its fast path;
 *   lines stay at most 1,000 characters so stack traces remain readable, and the source maps map back;
 * - zod's error messages in 40+ languages (`z.locales`, ~350 kB parsed by every command that reads a
 *   config) are replaced by the English one, the only one the tool uses (zod sets it as its default);
 * - yargs' help-text layout libraries load when help is first rendered, not at every start.
 *
 * Deterministic: same inputs, same files. The code cache is not a build output: V8's cache bytes differ
 * from one process to the next, so the CLI writes it beside the bundle on first use (`dist/bundle/cache/`,
 * emptied by every build with the rest of `dist/bundle`).
 */
import { createHash } from 'node:crypto'
import { chmodSync, readFileSync, rmSync, writeFileSync } from 'node:fs'
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

/**
 * Gives yargs lazy stand-ins for `cliui` and `string-width`, which it calls only to render help text.
 * Loading them builds Unicode property regexes, an `Intl.Segmenter` and East Asian width tables at
 * start-up (~20 ms of every command); behind the stand-ins they load on the first help text instead.
 * Inside the bundle, `require` of an ES module evaluates it on that first call.
 */
const lazyHelpText = {
  name: 'yargs-lazy-help-text',
  setup(b) {
    b.onResolve({ filter: /^(cliui|string-width)$/ }, (args) => {
      if (!/[\\/]node_modules[\\/]yargs[\\/]/.test(args.importer)) return undefined
      return { path: args.path, namespace: 'lazy-help-text', pluginData: { resolveDir: args.resolveDir } }
    })
    b.onLoad({ filter: /.*/, namespace: 'lazy-help-text' }, (args) => ({
      contents: `export default function lazy(...args) { return require(${JSON.stringify(args.path)}).default(...args) }\n`,
      resolveDir: args.pluginData.resolveDir,
      loader: 'js',
    }))
  },
}

rmSync(outdir, { recursive: true, force: true })

/** Options shared by the builds. */
const common = {
  bundle: true,
  platform: 'node',
  target: 'node20',
  sourcemap: true,
  minifyWhitespace: true,
  lineLimit: 1000,
  legalComments: 'none',
  logLevel: 'warning',
}

const cli = path.join(outdir, 'cli.cjs')
await build({
  ...common,
  entryPoints: ['dist/cli/main.js'],
  format: 'cjs',
  outfile: cli,
  external: ['@duckdb/node-bindings'],
  // A CommonJS script has no `import.meta`: its URL is derived from `__filename` instead.
  inject: ['scripts/import-meta-url.mjs'],
  define: { 'import.meta.url': 'importMetaUrl' },
  plugins: [englishOnlyZod, lazyHelpText],
})
let text = readFileSync(cli, 'latin1')
// The script becomes a function body: its `#!` line turns into a comment (same line numbers).
if (text.startsWith('#!')) text = `//${text.slice(2)}`
const nonAscii = /[\u0080-\u00ff]/.exec(text) // read as latin1: every byte is one character
if (nonAscii !== null) {
  throw new Error(
    `${cli} holds a non-ASCII character at offset ${nonAscii.index}; launch.ts reads it as latin1: keep esbuild's ASCII output`,
  )
}
// The bundle starts with its own id, which launch.ts compares with the id it was built with: a cache is
// used only when the two files come from the same build (V8 itself checks only the source's length).
const bundleId = createHash('sha256').update(text).digest('hex').slice(0, 16)
writeFileSync(cli, `/*slopeshift-bundle:${bundleId}*/${text}`, 'latin1')

await build({
  ...common,
  entryPoints: { slopeshift: 'dist/cli/launch.js', 'discover-worker': 'dist/dataset/discover-worker.js' },
  format: 'esm',
  outdir,
  define: { __SLOPESHIFT_BUNDLE_ID__: JSON.stringify(bundleId) },
  // CommonJS packages inside an ES module bundle (yaml in the worker) call `require` for Node built-ins.
  banner: {
    js: "import { createRequire as __ssRequire } from 'node:module'; const require = __ssRequire(import.meta.url);",
  },
})
chmodSync(path.join(outdir, 'slopeshift.js'), 0o755)
