/**
 * `npm run bench`: builds, then measures the performance targets of issues 2–4 and prints one
 * table per section plus the machine; writes everything to `.bench/results.json`. Figures are
 * printed, never asserted (style.md §4.6).
 *
 *   tsx test/bench/run.ts [--only parquet,arrow,decide,ledger,scale,tables] [--reps 3] [--threads 2]
 *                         [--decide-series 1000000] [--ledger-files 10000] [--ledger-budget 900]
 *                         [--scale-series 100000] [--quick]
 *
 * Sections:
 * - parquet: `slopeshift run` whole process on 10 M rows (Parquet snappy, zstd) vs a hand-written
 *   DuckDB REGR_* query (issue 2);
 * - arrow: the same on Arrow IPC (uncompressed, LZ4) plus the reader's in-process pass (issue 2);
 * - decide: 1,000,000 series through tests + FDR + verdicts (issue 3);
 * - ledger: no-op rerun and one-new-file rerun over 10,000 files (issue 4); the first run over an
 *   empty state is slow (one partials file per input file) and stopped after --ledger-budget
 *   seconds; when it completes, its output state is cached (keyed by a hash of dist/) and later
 *   bench runs start from a copy of it;
 * - scale: 100,000 series × 4 hourly windows (2.4 M rows, 400,000 (series, window) pairs) through
 *   `slopeshift run`, serial adjustment off and on: time per stage and peak RSS as the pairs grow;
 * - tables: the table-writer bench `test/bench/tables-write.ts` (not in the default set).
 * Inputs are generated once (seeded, deterministic) and cached under `.bench/data/`.
 */
import { existsSync } from 'node:fs'
import { mkdir, readFile, writeFile } from 'node:fs/promises'
import { availableParallelism, cpus, loadavg, totalmem } from 'node:os'
import path from 'node:path'
import { parseArgs } from 'node:util'
import { benchDecide } from './decide.js'
import { defaultMetricsSpec, ensureMetrics } from './gen-metrics.js'
import { benchLedger } from './ledger.js'
import { benchDir, lastLine, projectRoot, rssMethod, runProcess } from './lib.js'
import { benchScale } from './scale.js'
import { benchThroughput } from './throughput.js'

const allSections = ['parquet', 'arrow', 'decide', 'ledger', 'scale', 'tables'] as const
type Section = (typeof allSections)[number]
const defaultSections: readonly Section[] = ['parquet', 'arrow', 'decide', 'ledger', 'scale']

const { values } = parseArgs({
  options: {
    only: { type: 'string' },
    reps: { type: 'string', default: '3' },
    threads: { type: 'string', default: '2' },
    'decide-series': { type: 'string', default: '1000000' },
    'ledger-files': { type: 'string', default: '10000' },
    'ledger-budget': { type: 'string', default: '900' },
    'scale-series': { type: 'string', default: '100000' },
    quick: { type: 'boolean', default: false },
  },
})

function positiveInt(name: string, text: string | undefined): number {
  const n = Number(text)
  if (!Number.isInteger(n) || n < 1) throw new Error(`--${name} must be a positive integer, got ${text}`)
  return n
}

const sections: Section[] =
  values.only === undefined
    ? [...defaultSections]
    : values.only.split(',').map((s) => {
        const name = s.trim()
        if (!(allSections as readonly string[]).includes(name)) {
          throw new Error(`--only: unknown section "${name}" (known: ${allSections.join(', ')})`)
        }
        return name as Section
      })
const reps = values.quick ? 1 : positiveInt('reps', values.reps)
const threads = positiveInt('threads', values.threads)

const machine = {
  nproc: availableParallelism(),
  cpu: cpus()[0]?.model ?? 'unknown',
  memGiB: Math.round(totalmem() / 2 ** 30),
  node: process.version,
  platform: `${process.platform} ${process.arch}`,
  loadAtStart: loadavg(),
  rssMethod,
  startedAt: new Date().toISOString(),
}
console.log(
  `machine: ${machine.nproc} CPUs (${machine.cpu}), ${machine.memGiB} GiB, node ${machine.node}, ${machine.platform}; load average ${machine.loadAtStart.map((l) => l.toFixed(1)).join(' ')}`,
)
console.log(`sections: ${sections.join(', ')}; reps ${reps}; engine threads ${threads}; peak RSS: ${rssMethod}`)
if ((machine.loadAtStart[0] ?? 0) > machine.nproc) {
  console.log(
    `note: load average ${machine.loadAtStart[0]?.toFixed(1)} > ${machine.nproc} CPUs: other work shares this machine, so wall times are inflated; CPU s columns are less affected`,
  )
}

const results: Record<string, unknown> = { machine, sections, reps, threads }
const started = performance.now()

if (sections.includes('parquet') || sections.includes('arrow')) {
  const data = await ensureMetrics(defaultMetricsSpec)
  console.log(
    `inputs (${data.generatedNow ? 'generated now' : 'cached'}; ${data.nullValues.toLocaleString('en-US')} null values):`,
  )
  for (const i of data.inputs) console.log(`  ${i.name}: ${(i.bytes / 1e6).toFixed(0)} MB — ${i.note}`)
  for (const s of data.skipped) console.log(`  skipped ${s.name}: ${s.reason}`)
  const formats = (['parquet', 'arrow'] as const).filter((f) => sections.includes(f))
  results.inputs = { spec: data.spec, inputs: data.inputs, skipped: data.skipped, nullValues: data.nullValues }
  results.throughput = await benchThroughput(data, { reps, threads, formats })
}

if (sections.includes('ledger')) {
  results.ledger = await benchLedger({
    files: positiveInt('ledger-files', values['ledger-files']),
    rowsPerFile: 100,
    noopReps: Math.max(2, reps),
    threads,
    firstRunBudgetMs: positiveInt('ledger-budget', values['ledger-budget']) * 1000,
  })
}

if (sections.includes('decide')) {
  results.decide = await benchDecide({
    series: positiveInt('decide-series', values['decide-series']),
    points: 60,
    seed: 20261201,
    reps: Math.min(reps, 2),
  })
}

if (sections.includes('scale')) {
  results.scale = await benchScale({
    series: positiveInt('scale-series', values['scale-series']),
    windows: 4,
    rowsPerWindow: 6,
    threads,
  })
}

if (sections.includes('tables')) {
  const run = await runProcess(process.execPath, [
    path.join(projectRoot, 'node_modules', 'tsx', 'dist', 'cli.mjs'),
    path.join(projectRoot, 'test', 'bench', 'tables-write.ts'),
  ])
  console.log('\ntables (test/bench/tables-write.ts):')
  console.log(run.exitCode === 0 ? run.stdout.trimEnd() : `FAILED exit ${run.exitCode}: ${lastLine(run.stderr)}`)
  results.tables = { exitCode: run.exitCode, output: run.stdout }
}

results.totalS = (performance.now() - started) / 1000
results.loadAtEnd = loadavg()
await mkdir(benchDir, { recursive: true })
const out = path.join(benchDir, 'results.json')
// keep the latest result of the sections not run this time, so --only runs add up
let previous: Record<string, unknown> = {}
if (existsSync(out)) {
  try {
    previous = JSON.parse(await readFile(out, 'utf8')) as Record<string, unknown>
  } catch {
    previous = {}
  }
}
const kept = Object.fromEntries(
  Object.entries(previous).filter(
    ([k]) => ['inputs', 'throughput', 'ledger', 'decide', 'scale', 'tables'].includes(k) && !(k in results),
  ),
)
const merged = {
  ...kept,
  ...results,
  measuredAt: {
    ...((previous.measuredAt as object | undefined) ?? {}),
    ...Object.fromEntries(sections.map((s) => [s, machine.startedAt])),
  },
}
await writeFile(out, `${JSON.stringify(merged, null, 2)}\n`)
console.log(
  `\ntotal ${(results.totalS as number).toFixed(0)} s; load average at end ${loadavg()
    .map((l) => l.toFixed(1))
    .join(' ')}; results written to ${path.relative(projectRoot, out)}`,
)
