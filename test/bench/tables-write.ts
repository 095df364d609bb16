/**
 * Write and read time of the table writers, with one shared DuckDB connection. Results go in notes, never asserted.
 * Run: `npx tsx test/bench/tables-write.ts` (or `npx tsx test/bench/run.ts --only tables`).
 *
 * 1. One run's writes at the issue-2 scale (1,000 series × 24 hourly windows = 24,000 windows, one day): the fits and
 *    shifts tables through replaceWindows into a staging folder, and the partials of one input file (serial off and
 *    ar1). The first call of each is printed apart: it runs on cold JIT, as in a `slopeshift run` process.
 * 2. 100k fits rows (500 sites × 2 compressors × 100 hourly windows, 5 UTC-date partitions) per compression codec.
 */
import { mkdtemp, readFile, rm, stat } from 'node:fs/promises'
import { loadavg, tmpdir } from 'node:os'
import { join } from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { addRow, emptyMoments } from '../../src/kernel/moments.js'
import { writePartials } from '../../src/store/partials.js'
import {
  type Compression,
  listTableFiles,
  readTable,
  replacePartitions,
  replaceWindows,
  writeTable,
} from '../../src/tables/index.js'
import type { FitRow, PartialMoments, ShiftRow } from '../../src/types.js'
import { fitGrid, fitRow, keyColumns, shiftRow } from '../unit/tables/sample-rows.js'

const rows = fitGrid(500, 100)
const instance = await DuckDBInstance.create(':memory:')
const connection = await instance.connect()
const root = await mkdtemp(join(tmpdir(), 'slopeshift-bench-tables-'))
const median = (xs: number[]): number => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)] ?? Number.NaN

/** Wall and CPU (user + system, all threads) milliseconds of `work`: CPU time is less sensitive to a busy machine. */
async function timed(work: () => Promise<unknown>): Promise<{ wallMs: number; cpuMs: number }> {
  const cpu0 = process.cpuUsage()
  const t0 = performance.now()
  await work()
  const cpu = process.cpuUsage(cpu0)
  return { wallMs: performance.now() - t0, cpuMs: (cpu.user + cpu.system) / 1000 }
}
const fmt = (t: { wallMs: number; cpuMs: number }): string =>
  `${t.wallMs.toFixed(0)} ms wall / ${t.cpuMs.toFixed(0)} ms CPU`

/** The writes of one `slopeshift run` over 1,000 series × 24 hourly windows (test/bench/gen-metrics.ts scale). */
function runScale(): { fits: FitRow[]; shifts: ShiftRow[]; partials: PartialMoments[]; lagPartials: PartialMoments[] } {
  const start = Date.UTC(2026, 11, 1)
  const hourMs = 3_600_000
  const fits: FitRow[] = []
  const shifts: ShiftRow[] = []
  const partials: PartialMoments[] = []
  const lagPartials: PartialMoments[] = []
  for (let s = 0; s < 1000; s++) {
    // Series names as gen-metrics.ts makes them; rows come sorted by series, as the pipeline hands them over.
    const key = [`cold-site-${String(Math.floor(s / 10)).padStart(3, '0')}/cmp-${String(s % 10).padStart(2, '0')}`]
    for (let w = 0; w < 24; w++) {
      const ws = start + w * hourMs
      const common = { run_id: 'run-20261201T230000Z-0001' }
      fits.push(
        fitRow(key, ws, {
          ...common,
          y_mean: s + w / 10,
          slope: 0.01 * s - w / 7,
          r1: null,
          durbin_watson: null,
          limit_value: null,
          limit_at: null,
          limit_at_low: null,
          limit_at_high: null,
          limit_note: null,
          computed_at: start + 86_400_000,
        }),
      )
      if (w > 0) {
        const q = ((s * 24 + w) % 997) / 997
        shifts.push(shiftRow(key, ws, { ...common, slope: s / 1000 + w, q_value: q, reason: `q ${q.toFixed(3)}` }))
      }
      const m = emptyMoments(false)
      const lag = emptyMoments(true)
      for (let i = 0; i < 5; i++) {
        addRow(m, i * 11.9 + s / 1000, 40 + s / 100 + i * 0.37)
        addRow(lag, i * 11.9 + s / 1000, 40 + s / 100 + i * 0.37)
      }
      const file = '/lake/metrics/metrics-snappy.parquet'
      partials.push({ file, key, windowStartMs: ws, moments: m })
      lagPartials.push({ file, key, windowStartMs: ws, moments: lag })
    }
  }
  return { fits, shifts, partials, lagPartials }
}

const loadText = (): string =>
  loadavg()
    .map((l) => l.toFixed(1))
    .join(' ')

/** Times `work(i)` `reps + 1` times: the first call alone (cold JIT), then the median of the rest. */
async function firstAndMedian(label: string, reps: number, work: (i: number) => Promise<unknown>): Promise<void> {
  const walls: number[] = []
  const cpus: number[] = []
  let first = { wallMs: 0, cpuMs: 0 }
  for (let i = 0; i <= reps; i++) {
    const t = await timed(() => work(i))
    if (i === 0) first = t
    else {
      walls.push(t.wallMs)
      cpus.push(t.cpuMs)
    }
  }
  process.stdout.write(
    `${label}: first call ${fmt(first)}; then median ${median(walls).toFixed(0)} ms wall ` +
      `(${walls.map((w) => w.toFixed(0)).join(', ')}), ${median(cpus).toFixed(0)} ms CPU; load ${loadText()}\n`,
  )
}

try {
  const scale = runScale()
  process.stdout.write(
    `run scale: ${scale.fits.length} fits, ${scale.shifts.length} shifts, ${scale.partials.length} partials; ` +
      `load average ${loadText()}\n`,
  )
  const reps = 7
  await firstAndMedian('partials, serial off (snappy)', reps, (i) =>
    writePartials(join(root, 'partials', `off-${i}.parquet`), scale.partials, { connection }),
  )
  await firstAndMedian('partials, serial ar1 (snappy)', reps, (i) =>
    writePartials(join(root, 'partials', `ar1-${i}.parquet`), scale.lagPartials, { connection }),
  )
  const replaceWindowStarts = [...new Set(scale.fits.map((f) => f.window_start))]
  await firstAndMedian(
    'fits + shifts, replaceWindows staged (zstd, the default output.compression)',
    reps,
    async (i) => {
      for (const [table, tableRows] of [
        ['fits', scale.fits],
        ['shifts', scale.shifts],
      ] as const) {
        await replaceWindows(table, tableRows as never, {
          keyColumns: ['series'],
          compression: 'zstd',
          connection,
          dir: join(root, `run-${i}`, table),
          stagingDir: join(root, `run-${i}`, 'staging', table),
          replaceWindowStarts,
        })
      }
    },
  )
  const staged = (i: number): Promise<Buffer[]> =>
    listTableFiles('fits', join(root, `run-${i}`, 'staging', 'fits')).then((files) =>
      Promise.all(files.map((f) => readFile(f))),
    )
  const [a, b] = [await staged(0), await staged(reps)]
  process.stdout.write(
    `fits files byte-identical across calls: ${a.length > 0 && a.every((x, k) => b[k]?.equals(x))}\n`,
  )
  process.stdout.write(`fits rows: ${rows.length}; load average ${loadText()}\n`)
  for (const compression of ['zstd', 'snappy', 'gzip', 'uncompressed'] as Compression[]) {
    const times: number[] = []
    const cpus: number[] = []
    let bytes = 0
    let identical = true
    let first: Buffer[] = []
    for (let i = 0; i < 3; i++) {
      const dir = join(root, `${compression}-${i}`, 'fits')
      const t = await timed(() => writeTable('fits', rows, { keyColumns, dir, compression, connection }))
      times.push(t.wallMs)
      cpus.push(t.cpuMs)
      const files = await listTableFiles('fits', dir)
      const contents = await Promise.all(files.map((f) => readFile(f)))
      if (i === 0) first = contents
      else identical &&= contents.every((c, k) => first[k]?.equals(c) === true)
      bytes = (await Promise.all(files.map((f) => stat(f)))).reduce((s, st) => s + st.size, 0)
    }
    process.stdout.write(
      `write ${compression}: median ${median(times).toFixed(0)} ms wall (${times.map((t) => t.toFixed(0)).join(', ')}), ` +
        `${median(cpus).toFixed(0)} ms CPU, ` +
        `${(bytes / 1e6).toFixed(2)} MB, byte-identical across 3 writes: ${identical}\n`,
    )
  }
  const dir = join(root, 'zstd-0', 'fits')
  let count = 0
  const r = await timed(async () => {
    count = (await readTable('fits', dir, keyColumns, { connection })).length
  })
  process.stdout.write(`read: ${count} rows in ${fmt(r)}\n`)
  const fresh = rows.filter((_, i) => i % 100 === 0).map((r) => ({ ...r, run_id: 'run-0002' }))
  const t2 = performance.now()
  await replacePartitions('fits', fresh, { keyColumns, dir, compression: 'zstd', connection })
  process.stdout.write(
    `replacePartitions: ${fresh.length} new rows into 100k in ${(performance.now() - t2).toFixed(0)} ms\n`,
  )
  const t3 = performance.now()
  await writeTable('fits', rows, { keyColumns, dir: join(root, 'own', 'fits'), compression: 'zstd' })
  process.stdout.write(`write zstd with a short-lived instance: ${(performance.now() - t3).toFixed(0)} ms\n`)
} finally {
  connection.closeSync()
  instance.closeSync()
  await rm(root, { recursive: true, force: true })
}
