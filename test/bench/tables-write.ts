/**
 * Write and read time of the table writers for 100k fits rows (500 sites × 2 compressors × 100 hourly windows,
 * 5 UTC-date partitions) per compression codec, with one shared DuckDB connection. Results go in notes, never
 * asserted. Run: `npx tsx test/bench/tables-write.ts`.
 */
import { mkdtemp, readFile, rm, stat } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { type Compression, listTableFiles, readTable, replacePartitions, writeTable } from '../../src/tables/index.js'
import { fitGrid, keyColumns } from '../unit/tables/sample-rows.js'

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

try {
  process.stdout.write(
    `fits rows: ${rows.length}; load average ${(await import('node:os'))
      .loadavg()
      .map((l) => l.toFixed(1))
      .join(' ')}\n`,
  )
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
