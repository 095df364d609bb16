/**
 * Issue 2, Arrow in-process figure: read + accumulate one Arrow IPC file with the built reader
 * (`readArrowPartials` from dist/dataset/arrow.js) several times in one fresh process and print the
 * time of each pass (wall and process CPU) and the 1-minute load average at the start. run.ts
 * spawns it under /usr/bin/time so the process's peak RSS is known.
 *
 *   node test/bench/arrow-read.mjs <file.arrow> <serial: off|ar1> <reps>
 *
 * Plain JavaScript so it runs on `node` alone, like the built CLI. Prints one JSON line.
 */
import { stat } from 'node:fs/promises'
import { loadavg } from 'node:os'
import path from 'node:path'
import { fileURLToPath, pathToFileURL } from 'node:url'

const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '..', '..')
const dist = (rel) => import(pathToFileURL(path.join(root, 'dist', rel)).href)

const [file, serial = 'off', repsArg = '3'] = process.argv.slice(2)
if (file === undefined) {
  console.error('usage: node test/bench/arrow-read.mjs <file.arrow> <off|ar1> <reps>')
  process.exitCode = 64
} else {
  const t0 = performance.now()
  const { readArrowPartials } = await dist('dataset/arrow.js')
  const { configSchema } = await dist('config/schema.js')
  const { momentsPlanOf } = await dist('pipeline/plan.js')
  const importMs = performance.now() - t0
  const config = configSchema.parse({
    source: { paths: [file], keys: ['series'], x: { column: 'ts' }, y: { column: 'value' } },
    window: { size: '1h', xUnit: 'minute' },
    detect: { serial },
    output: { root: path.join(root, '.bench', 'work', 'unused') },
  })
  const plan = momentsPlanOf(config)
  const st = await stat(file)
  const source = { path: path.resolve(file), kind: 'arrow-file', size: st.size, mtimeMs: st.mtimeMs, hive: {} }
  const load1 = loadavg()[0]
  const passes = []
  for (let i = 0; i < Number(repsArg); i++) {
    const cpu0 = process.cpuUsage()
    const t = performance.now()
    const r = await readArrowPartials(source, plan)
    const ms = performance.now() - t
    const cpu = process.cpuUsage(cpu0)
    const cpuMs = (cpu.user + cpu.system) / 1000
    const n = r.partials.reduce((a, p) => a + p.moments.n, 0)
    passes.push({ ms, cpuMs, rows: r.stats.rows, skipped: r.stats.skipped, partials: r.partials.length, pointsUsed: n })
  }
  console.log(JSON.stringify({ importMs, trackLag: plan.trackLag, load1, passes }))
}
