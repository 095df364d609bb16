import { join } from 'node:path'
import { describe, expect, it } from 'vitest'
import { quoteString } from '../../src/dataset/sql.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import { silentLogger } from '../../src/log.js'
import { readPartials } from '../../src/pipeline/read.js'
import type { SourceFile } from '../../src/types.js'
import { writeArrowFile } from '../fixtures/arrow-writer.js'
import { useParquetScratch } from '../helpers/parquet-write.js'
import { powerDrawPlan } from '../helpers/power-plan.js'

// A read with more (file, series, window) partials than a JavaScript call takes arguments: 75,000 invented compressor
// units over two hourly windows, two rows each, so 150,000 partials from one file (gathering them with
// `push(...partials)` threw "Maximum call stack size exceeded" from about 120,000). Parquet written by DuckDB, Arrow
// IPC by apache-arrow's writer.

const hourly = parseWindow('1h') as WindowSpec
const day0 = Date.UTC(2026, 11, 1)
const units = 75_000
const windows = 2
const rowsPerWindow = 2
const rows = units * windows * rowsPerWindow

describe('a read with 150,000 partials', () => {
  const scratch = useParquetScratch('slopeshift-many-windows-')

  it('gathers every partial of a Parquet scan', async () => {
    const path = join(scratch.dir, 'units.parquet')
    // row i: unit i % units, minute 30 * (i div units) from day0, so each unit has rows at minutes 0, 30, 60, 90
    await scratch.writer.session.run(
      `COPY (SELECT 'unit-' || (i % ${units}) AS unit, ${day0} + (i // ${units}) * 1800000 AS ts,
                    4 + (i % 13) / 10 AS power_kw
             FROM range(${rows}) AS r(i))
       TO ${quoteString(path)} (FORMAT parquet)`,
    )
    const file: SourceFile = { path, kind: 'parquet', hive: {}, size: 0, mtimeMs: 0 }
    // the REGR_* scan (no lag block) and the ordered row stream (with it)
    for (const trackLag of [false, true]) {
      const r = await readPartials([file], { ...powerDrawPlan(hourly, ['unit']), trackLag }, readOptions)
      expect(r.partials).toHaveLength(units * windows)
      expect(r.partials.every((p) => p.moments.n === rowsPerWindow)).toBe(true)
      expect(r.stats).toEqual([{ file: path, rows, skipped: 0 }])
    }
  })

  it('gathers every partial of an Arrow IPC file', async () => {
    const path = join(scratch.dir, 'units.arrow')
    const unit: string[] = []
    const ts: bigint[] = []
    const power: number[] = []
    for (let i = 0; i < rows; i++) {
      unit.push(`unit-${i % units}`)
      ts.push(BigInt(day0 + Math.floor(i / units) * 1_800_000))
      power.push(4 + (i % 13) / 10)
    }
    await writeArrowFile(path, [
      { kind: 'key', name: 'unit', values: unit },
      { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: ts },
      { kind: 'float64', name: 'power_kw', values: power },
    ])
    const file: SourceFile = { path, kind: 'arrow-file', hive: {}, size: 0, mtimeMs: 0 }
    const r = await readPartials([file], powerDrawPlan(hourly, ['unit']), readOptions)
    expect(r.partials).toHaveLength(units * windows)
    expect(r.partials.every((p) => p.moments.n === rowsPerWindow)).toBe(true)
    expect(r.stats).toEqual([{ file: path, rows, skipped: 0 }])
  })
})

const readOptions = { threads: 2, memoryLimit: '1GB', log: silentLogger() }
