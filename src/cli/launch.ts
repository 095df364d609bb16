#!/usr/bin/env node
/**
 * The shipped entry, `dist/bundle/slopeshift.js`: runs the CLI bundle `cli.cjs` beside it (main.ts and
 * everything it loads, one CommonJS script) through `vm.Script` with a V8 code cache (code-cache.ts),
 * so that a run starts without parsing 2 MB of JavaScript. Only the build runs this module: the bundle
 * script (scripts/bundle.mjs) sets `__SLOPESHIFT_BUNDLE_ID__` to the hash of `cli.cjs`.
 *
 * With `--enable-source-maps` the bundle is loaded by Node's CommonJS loader instead (no cache), which is
 * what maps stack traces back to the TypeScript sources.
 *
 * The bundle is one script rather than ESM chunks loaded on demand: ESM cannot take a code cache in
 * Node 20, and reading chunks one at a time, through the thread pool that file discovery keeps busy,
 * delayed the run by more than compiling all of them at once.
 */
import { readFileSync } from 'node:fs'
import { createRequire } from 'node:module'
import path from 'node:path'
import { fileURLToPath } from 'node:url'
import vm from 'node:vm'
import { startEarlyDiscovery } from '../dataset/early-discovery.js'
import { exposeGc } from '../dataset/young-gc.js'
import { codeCacheDir, codeCacheName, commandOf, readCodeCache, writeCodeCache } from './code-cache.js'

declare const __SLOPESHIFT_BUNDLE_ID__: string

/** The CommonJS module function the bundle becomes. */
type BundleFunction = (
  exports: object,
  require: NodeJS.Require,
  module: { exports: object },
  filename: string,
  dirname: string,
) => void

const dir = path.dirname(fileURLToPath(import.meta.url))
const file = path.join(dir, 'cli.cjs')
// Before the cached bundle compiles: a code cache is checked against the V8 flags it was made under.
exposeGc()
// `run` lists its inputs in a worker from now on, while the bundle below loads (early-discovery.ts).
startEarlyDiscovery(process.argv.slice(2), path.join(dir, 'discover-worker.js'))
if (process.sourceMapsEnabled) {
  // `--enable-source-maps` (stack traces in TypeScript terms) works only for modules Node loads itself.
  createRequire(file)(file)
} else {
  runCached(file)
}

/** Runs the bundle through `vm.Script`, with its code cache when there is one that V8 accepts. */
function runCached(file: string): void {
  // The build checks that the bundle is pure ASCII, so latin1 reads it exactly (and fastest).
  const source = readFileSync(file, 'latin1')
  const cacheDir = codeCacheDir(process.env, dir)
  // A bundle from another build than this entry (replaced while starting) runs without a cache.
  const sameBuild = source.startsWith(`/*slopeshift-bundle:${__SLOPESHIFT_BUNDLE_ID__}*/`)
  const cacheFile =
    cacheDir === null || !sameBuild
      ? null
      : path.join(
          cacheDir,
          codeCacheName(__SLOPESHIFT_BUNDLE_ID__, commandOf(process.argv.slice(2)), {
            version: process.version,
            arch: process.arch,
            flags: `${process.execArgv.join(' ')}\0${process.env.NODE_OPTIONS ?? ''}`,
          }),
        )
  const cachedData = cacheFile === null ? undefined : readCodeCache(cacheFile)
  // The wrapper is Node's own CommonJS one, on the bundle's first line: line numbers stay as they are.
  const script = new vm.Script(
    `(function (exports, require, module, __filename, __dirname) {${source}\n})`,
    cachedData === undefined ? { filename: file } : { filename: file, cachedData },
  )
  if (cacheFile !== null && (cachedData === undefined || script.cachedDataRejected === true)) {
    // After a successful command every function it ran is compiled: that is the cache the next run wants.
    process.once('exit', (code) => {
      if (code === 0) writeCodeCache(script, cacheFile)
    })
  }
  const run = script.runInThisContext() as BundleFunction
  const bundleModule = { exports: {} }
  run.call(bundleModule.exports, bundleModule.exports, createRequire(file), bundleModule, file, dir)
}
