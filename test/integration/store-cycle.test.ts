/**
 * The store modules wired into a miniature run (lock → recover → plan → partials → affected windows
 * → staging → publish → ledger commit), to check that an interrupted run converges to the tables of
 * a clean run (issue #4). The "table" is the merged moments per window, written as Parquet.
 */
import { mkdir, mkdtemp, readdir, readFile, rm, stat, unlink } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import type { Moments } from '../../src/kernel/moments.js'
import { addRow, emptyMoments, mergeMoments } from '../../src/kernel/moments.js'
import { parseWindow, windowStartOf } from '../../src/kernel/window.js'
import { ledgerAfter, planFiles } from '../../src/plan/files.js'
import { affectedWindows } from '../../src/plan/windows.js'
import { fingerprintFiles } from '../../src/store/fingerprint.js'
import { commitLedger, readLedger } from '../../src/store/ledger.js'
import { acquireRunLock } from '../../src/store/lock.js'
import {
  gcPartials,
  ledgerPartialsFiles,
  partialsFilePath,
  readPartials,
  writePartials,
} from '../../src/store/partials.js'
import { createStaging, discardStaging, publish, recoverStaging, stagingRoot } from '../../src/store/staging.js'
import type { PartialMoments } from '../../src/types.js'
import { seriesId } from '../../src/types.js'

const spec = parseWindow('1h')
if (spec === null) throw new Error('1h must parse')
const T0 = Date.UTC(2026, 0, 5)

let base: string
beforeEach(async () => {
  base = await mkdtemp(join(tmpdir(), 'slopeshift-cycle-'))
})
afterEach(async () => {
  await rm(base, { recursive: true, force: true })
})

class SimulatedCrash extends Error {}

/** Writes invented compressor power readings (one row a minute) for `minutes` from `startMs`. */
async function writeInput(path: string, startMs: number, minutes: number, drift: number): Promise<void> {
  const db = await DuckDBInstance.create(':memory:')
  const c = await db.connect()
  await c.run(
    `COPY (SELECT make_timestamp((${startMs} + i * 60000)::BIGINT * 1000) AS ts,
       CASE WHEN i % 2 = 0 THEN 'north' ELSE 'south' END AS site,
       3.1 + ${drift} * i + sin(i) * 0.2 AS kw FROM range(${minutes}) t(i))
     TO '${path}' (FORMAT parquet)`,
  )
  c.closeSync()
  db.closeSync()
}

/** Partial moments per (site, hour) of one input file; x in minutes from the window start. */
async function accumulate(path: string): Promise<PartialMoments[]> {
  const db = await DuckDBInstance.create(':memory:')
  const c = await db.connect()
  const rows = (
    await c.runAndReadAll(`SELECT epoch_ms(ts) AS t, site, kw FROM read_parquet('${path}') ORDER BY site, t`)
  ).getRows()
  c.closeSync()
  db.closeSync()
  const acc = new Map<string, PartialMoments>()
  for (const [t, site, kw] of rows) {
    const ms = Number(t)
    const start = windowStartOf(spec as NonNullable<typeof spec>, ms)
    const id = `${site}\u0000${start}`
    let p = acc.get(id)
    if (p === undefined) {
      p = { file: path, key: [String(site)], windowStartMs: start, moments: emptyMoments(true) }
      acc.set(id, p)
    }
    addRow(p.moments, (ms - start) / 60_000, Number(kw))
  }
  return [...acc.values()]
}

/** One run of the miniature pipeline; `crashAfter` stops it without any cleanup, like a kill. */
async function miniRun(root: string, input: string, runId: string, crashAfter?: 'partials' | 'publish') {
  const release = await acquireRunLock(root, { runId, waitMs: 5000, pollMs: 10 })
  try {
    const committed = await readLedger(root)
    await recoverStaging(root, committed.committedRunId)
    await gcPartials(root, committed)
    const discovered = await Promise.all(
      (await readdir(input)).sort().map(async (name) => {
        const path = join(input, name)
        const s = await stat(path)
        return { path, size: s.size, mtimeMs: s.mtimeMs, kind: 'parquet' as const }
      }),
    )
    const plan = planFiles(discovered, committed.files, await fingerprintFiles(discovered, committed.files))
    const fresh: PartialMoments[] = []
    for (const f of [...plan.new, ...plan.changed]) {
      const partials = await accumulate(f.path)
      await writePartials(partialsFilePath(root, f.path, f.fingerprint ?? ''), partials)
      fresh.push(...partials)
    }
    if (crashAfter === 'partials') throw new SimulatedCrash()
    const gone = [...plan.changed.flatMap((f) => (f.previous === null ? [] : [f.previous])), ...plan.deleted]
    const old = await readPartials(ledgerPartialsFiles(root, gone))
    const affected = affectedWindows(old, fresh, 1, spec as NonNullable<typeof spec>)
    const next = ledgerAfter(plan, runId)
    const starts = new Set(affected.map((w) => w.windowStartMs))
    const all = (await readPartials(ledgerPartialsFiles(root, next))).filter((p) => starts.has(p.windowStartMs))
    const merged = new Map<number, Map<string, Moments>>()
    for (const p of all) {
      const byKey = merged.get(p.windowStartMs) ?? new Map<string, Moments>()
      const id = seriesId(p.key)
      byKey.set(id, mergeMoments(byKey.get(id) ?? emptyMoments(true), p.moments))
      merged.set(p.windowStartMs, byKey)
    }
    const staging = await createStaging(root, runId)
    const remove: string[] = []
    for (const start of [...starts].sort((a, b) => a - b)) {
      const rel = `merged/window_start=${start}/part-0.parquet`
      const byKey = merged.get(start)
      if (byKey === undefined) {
        remove.push(rel)
        continue
      }
      const rows = [...byKey].map(([id, moments]) => ({
        file: 'merged',
        key: JSON.parse(id) as string[],
        windowStartMs: start,
        moments,
      }))
      await mkdir(join(staging, `merged/window_start=${start}`), { recursive: true })
      await writePartials(join(staging, rel), rows)
    }
    await publish(staging, root, { remove })
    if (crashAfter === 'publish') throw new SimulatedCrash()
    const ledger = await commitLedger(root, runId, next)
    await discardStaging(staging)
    await gcPartials(root, ledger)
    return { plan, affected }
  } finally {
    await release()
  }
}

/** Published files (outside `_state`) with their merged moments, for comparing two roots. */
async function published(root: string): Promise<Record<string, PartialMoments[]>> {
  const out: Record<string, PartialMoments[]> = {}
  const dir = join(root, 'merged')
  for (const sub of (await readdir(dir)).sort()) {
    const file = join(dir, sub, 'part-0.parquet')
    out[sub] = await readPartials([file])
  }
  return out
}

describe('store cycle', () => {
  it('converges after runs interrupted before the ledger commit to the tables of a clean run', async () => {
    const input = join(base, 'input')
    await mkdir(input)
    const a = join(input, 'a.parquet')
    const b = join(input, 'b.parquet')
    const c = join(input, 'c.parquet')
    await writeInput(a, T0, 90, 0.01) // hours 0 and 1
    await writeInput(b, T0 + 2 * 3_600_000, 60, 0.02) // hour 2
    const root = join(base, 'out')

    const first = await miniRun(root, input, 'run-1')
    expect(first.plan.new.map((f) => f.path)).toEqual([a, b])
    const afterFirst = await published(root)
    expect(Object.keys(afterFirst)).toEqual([
      `window_start=${T0}`,
      `window_start=${T0 + 3_600_000}`,
      `window_start=${T0 + 2 * 3_600_000}`,
    ])

    // b rewritten, c late for hour 0, a deleted.
    await writeInput(b, T0 + 2 * 3_600_000, 60, 0.05)
    await writeInput(c, T0 + 30 * 60_000, 10, 0.03)
    await unlink(a)

    await expect(miniRun(root, input, 'run-2', 'partials')).rejects.toBeInstanceOf(SimulatedCrash)
    await expect(miniRun(root, input, 'run-3', 'publish')).rejects.toBeInstanceOf(SimulatedCrash)
    expect((await readLedger(root)).committedRunId).toBe('run-1')
    expect(await readdir(stagingRoot(root))).toEqual(['run-3'])

    const last = await miniRun(root, input, 'run-4')
    expect(last.plan.changed.map((f) => f.path)).toEqual([b])
    expect(last.plan.new.map((f) => f.path)).toEqual([c])
    expect(last.plan.deleted.map((e) => e.path)).toEqual([a])
    expect(await readdir(stagingRoot(root))).toEqual([])
    expect((await readLedger(root)).files.map((f) => [f.path, f.runId])).toEqual([
      [b, 'run-4'],
      [c, 'run-4'],
    ])
    expect((await readdir(join(root, '_state', 'partials'))).length).toBe(2)

    const clean = join(base, 'clean')
    await miniRun(clean, input, 'clean-1')
    const want = await published(clean)
    expect(Object.keys(want)).toEqual([`window_start=${T0}`, `window_start=${T0 + 2 * 3_600_000}`])
    expect(await published(root)).toEqual(want)
    for (const k of Object.keys(want)) {
      const rel = join('merged', k, 'part-0.parquet')
      expect(Buffer.compare(await readFile(join(root, rel)), await readFile(join(clean, rel)))).toBe(0)
    }

    const again = await miniRun(root, input, 'run-5')
    expect(again.affected).toEqual([])
    expect(again.plan.unchanged.map((f) => f.path)).toEqual([b, c])
  })
})
