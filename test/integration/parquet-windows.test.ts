import { mkdtemp, rm, stat } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readParquetPartials } from '../../src/dataset/parquet.js'
import { parseWindow, type WindowSpec, windowEndOf, windowStartOf } from '../../src/kernel/window.js'
import type { MomentsPlan, SourceFile } from '../../src/types.js'
import { ParquetWriter, type RawValue } from '../helpers/parquet-write.js'

let dir: string
let writer: ParquetWriter

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-parquet-win-'))
  writer = await ParquetWriter.open()
})

afterAll(async () => {
  writer.close()
  await rm(dir, { recursive: true, force: true })
})

const yearStart = Date.UTC(2026, 0, 1)
const yearEnd = Date.UTC(2027, 0, 1)

/**
 * Instants that stress a zone's calendar: every 5 h 3 min over 2026, the exact boundaries (±1 ms) of
 * every day, ISO week and month, and every 7 minutes around days that are not 24 hours long (DST).
 */
function probeInstants(timeZone: string): number[] {
  const out = new Set<number>()
  for (let t = yearStart; t < yearEnd; t += 18_180_000) out.add(t)
  for (const unit of ['day', 'isoweek', 'month'] as const) {
    const spec = parseWindow(unit, timeZone) as WindowSpec
    for (let s = windowStartOf(spec, yearStart); s < yearEnd; s = windowEndOf(spec, s)) {
      out
        .add(s - 1)
        .add(s)
        .add(s + 1)
      if (unit === 'day' && windowEndOf(spec, s) - s !== 86_400_000) {
        for (let t = s - 7_200_000; t < windowEndOf(spec, s) + 7_200_000; t += 420_000) out.add(t)
      }
    }
  }
  return [...out].sort((a, b) => a - b)
}

async function writeProbes(name: string, instants: readonly number[]): Promise<SourceFile> {
  const path = join(dir, name)
  const rows: RawValue[][] = instants.map((t, i) => [String(i), t, 1])
  await writer.write(path, { probe: 'VARCHAR', ts_ms: 'BIGINT', y: 'DOUBLE' }, rows, {
    select: "probe, timezone('UTC', epoch_ms(ts_ms)) AS ts, y",
  })
  const s = await stat(path)
  return { path, kind: 'parquet', size: s.size, mtimeMs: s.mtimeMs, hive: {} }
}

function planFor(window: WindowSpec): MomentsPlan {
  return {
    keys: ['probe'],
    x: { column: 'ts', epochUnit: 'ms' },
    y: { column: 'y' },
    weight: null,
    window,
    xUnit: 'hour',
    trackLag: false,
  }
}

// Zones with DST at 02:00/03:00 (Berlin, New York), a 30-minute DST shift (Lord Howe), DST at local
// midnight so 00:00 does not exist on the spring day (Santiago, Havana), and a +05:45 offset (Kathmandu).
const zones = [
  'Europe/Berlin',
  'America/New_York',
  'Australia/Lord_Howe',
  'America/Santiago',
  'America/Havana',
  'Asia/Kathmandu',
]

describe('readParquetPartials', () => {
  describe.each(zones)('calendar windows in %s', (timeZone) => {
    it.each(['day', 'isoweek', 'month'] as const)(
      'puts every row in the %s window that windowStartOf gives',
      async (unit) => {
        const instants = probeInstants(timeZone)
        const f = await writeProbes(`${timeZone.replace('/', '_')}-${unit}.parquet`, instants)
        const spec = parseWindow(unit, timeZone) as WindowSpec
        const { partials } = await readParquetPartials([f], planFor(spec), { threads: 2 })
        expect(partials).toHaveLength(instants.length)
        const mismatches: string[] = []
        for (const p of partials) {
          const t = instants[Number(p.key[0])] as number
          const ws = windowStartOf(spec, t)
          if (p.windowStartMs !== ws || p.moments.xMin !== (t - ws) / 3_600_000) {
            mismatches.push(`${new Date(t).toISOString()}: got ${p.windowStartMs}, x ${p.moments.xMin}; want ${ws}`)
          }
        }
        expect(mismatches.slice(0, 5)).toEqual([])
        if (unit === 'isoweek') {
          const weekdays = new Set(partials.map((p) => new Date(p.windowStartMs + 43_200_000).getUTCDay()))
          expect(weekdays).toEqual(new Set([1])) // Monday (noon UTC after a local midnight is still the same date here)
        }
      },
    )
  })

  it('puts rows next to boundaries that are not on a 15-minute grid (Monrovia 1971, −00:44:30) where windowStartOf does', async () => {
    // The bucket map leaves the cut buckets out, so these rows take the per-row time-zone path.
    const spec = parseWindow('day', 'Africa/Monrovia') as WindowSpec
    const instants: number[] = []
    for (let s = windowStartOf(spec, Date.UTC(1971, 4, 1)); s < Date.UTC(1971, 4, 6); s = windowEndOf(spec, s)) {
      for (const d of [-900_001, -60_000, -1, 0, 1, 60_000, 900_000, 43_200_000]) instants.push(s + d)
    }
    const f = await writeProbes('monrovia-1971.parquet', instants)
    const { partials } = await readParquetPartials([f], planFor(spec), { threads: 2 })
    expect(partials).toHaveLength(instants.length)
    for (const p of partials) {
      const t = instants[Number(p.key[0])] as number
      expect(p.windowStartMs, new Date(t).toISOString()).toBe(windowStartOf(spec, t))
      expect(p.moments.xMin).toBe((t - p.windowStartMs) / 3_600_000)
    }
  })

  it.each(['15m', '2h', '1d', '7d'])('aligns fixed %s windows to the epoch, before 1970 too', async (size) => {
    const instants = [-86_400_001, -3_600_000, -1, 0, 1, 899_999, 900_000, 604_799_999, 604_800_000, 1777852800123]
    const f = await writeProbes(`fixed-${size}.parquet`, instants)
    const spec = parseWindow(size) as WindowSpec
    const { partials } = await readParquetPartials([f], planFor(spec), { threads: 1 })
    for (const p of partials) {
      const t = instants[Number(p.key[0])] as number
      expect(p.windowStartMs).toBe(windowStartOf(spec, t))
      expect(p.moments.xMin).toBe((t - p.windowStartMs) / 3_600_000)
    }
    expect(partials).toHaveLength(instants.length)
  })
})
