import { describe, expect, it } from 'vitest'
import type { LedgerEntry, StatFile } from '../../../src/plan/files.js'
import {
  entriesTouching,
  entriesUnchanged,
  filesToFingerprint,
  isStatUnchanged,
  ledgerAfter,
  planFiles,
} from '../../../src/plan/files.js'

const entry = (path: string, size: number, mtimeMs: number, fingerprint: string): LedgerEntry => ({
  path,
  size,
  mtimeMs,
  fingerprint,
  runId: 'run-1',
})

const ledger: LedgerEntry[] = [
  entry('/lake/site=north/a.parquet', 100, 1000, 'fa'),
  entry('/lake/site=north/b.parquet', 200, 2000, 'fb'),
  entry('/lake/site=north/c.parquet', 300, 3000, 'fc'),
  entry('/lake/site=south/d.arrow', 400, 4000, 'fd'),
]

describe('isStatUnchanged', () => {
  it('is true only when both size and mtime match the ledger', () => {
    const e = entry('/x', 10, 5, 'f')
    expect(isStatUnchanged({ path: '/x', size: 10, mtimeMs: 5 }, e)).toBe(true)
    expect(isStatUnchanged({ path: '/x', size: 11, mtimeMs: 5 }, e)).toBe(false)
    expect(isStatUnchanged({ path: '/x', size: 10, mtimeMs: 6 }, e)).toBe(false)
  })
})

describe('filesToFingerprint', () => {
  const discovered: StatFile[] = [
    { path: '/lake/site=north/b.parquet', size: 200, mtimeMs: 2500 },
    { path: '/lake/site=north/a.parquet', size: 100, mtimeMs: 1000 },
    { path: '/lake/site=north/e.parquet', size: 50, mtimeMs: 9000 },
  ]

  it('asks for new files and stat-mismatched files only when verify is off', () => {
    expect(filesToFingerprint(discovered, ledger)).toEqual(['/lake/site=north/b.parquet', '/lake/site=north/e.parquet'])
  })

  it('asks for every discovered file when verify is on', () => {
    expect(filesToFingerprint(discovered, ledger, { verify: true })).toEqual([
      '/lake/site=north/a.parquet',
      '/lake/site=north/b.parquet',
      '/lake/site=north/e.parquet',
    ])
  })
})

describe('planFiles', () => {
  it('classifies new, changed, deleted and unchanged files sorted by path', () => {
    const discovered: StatFile[] = [
      { path: '/lake/site=north/e.parquet', size: 50, mtimeMs: 9000 }, // new
      { path: '/lake/site=north/c.parquet', size: 300, mtimeMs: 3500 }, // touched: same fingerprint
      { path: '/lake/site=north/b.parquet', size: 210, mtimeMs: 2500 }, // rewritten
      { path: '/lake/site=north/a.parquet', size: 100, mtimeMs: 1000 }, // stat equal, not fingerprinted
    ]
    const fps = new Map([
      ['/lake/site=north/e.parquet', 'fe'],
      ['/lake/site=north/c.parquet', 'fc'],
      ['/lake/site=north/b.parquet', 'fb2'],
    ])
    const plan = planFiles(discovered, ledger, fps)
    expect(plan.new.map((f) => [f.path, f.fingerprint, f.previous])).toEqual([
      ['/lake/site=north/e.parquet', 'fe', null],
    ])
    expect(plan.changed.map((f) => [f.path, f.fingerprint, f.previous?.fingerprint])).toEqual([
      ['/lake/site=north/b.parquet', 'fb2', 'fb'],
    ])
    expect(plan.unchanged.map((f) => [f.path, f.fingerprint, f.mtimeMs])).toEqual([
      ['/lake/site=north/a.parquet', 'fa', 1000],
      ['/lake/site=north/c.parquet', 'fc', 3500],
    ])
    expect(plan.deleted.map((e) => e.path)).toEqual(['/lake/site=south/d.arrow'])
  })

  it('treats a renamed file as deleted old path plus new path even with the same fingerprint', () => {
    const discovered: StatFile[] = [
      { path: '/lake/site=north/a.parquet', size: 100, mtimeMs: 1000 },
      { path: '/lake/site=north/b.parquet', size: 200, mtimeMs: 2000 },
      { path: '/lake/site=north/c.parquet', size: 300, mtimeMs: 3000 },
      { path: '/lake/site=west/d.arrow', size: 400, mtimeMs: 4000 },
    ]
    const plan = planFiles(discovered, ledger, new Map([['/lake/site=west/d.arrow', 'fd']]))
    expect(plan.new.map((f) => f.path)).toEqual(['/lake/site=west/d.arrow'])
    expect(plan.deleted.map((e) => e.path)).toEqual(['/lake/site=south/d.arrow'])
    expect(plan.changed).toEqual([])
    expect(plan.unchanged).toHaveLength(3)
  })

  it('marks a stat-mismatched file without a fingerprint as changed', () => {
    const plan = planFiles([{ path: '/lake/site=north/a.parquet', size: 100, mtimeMs: 1001 }], ledger)
    expect(plan.changed.map((f) => [f.path, f.fingerprint])).toEqual([['/lake/site=north/a.parquet', null]])
    expect(plan.deleted.map((e) => e.path)).toEqual([
      '/lake/site=north/b.parquet',
      '/lake/site=north/c.parquet',
      '/lake/site=south/d.arrow',
    ])
  })

  it('marks everything deleted when nothing is discovered and everything new on an empty ledger', () => {
    expect(planFiles([], ledger).deleted).toHaveLength(4)
    const plan = planFiles(
      [
        { path: '/z', size: 1, mtimeMs: 1 },
        { path: '/z', size: 1, mtimeMs: 1 },
      ],
      [],
    )
    expect(plan.new.map((f) => f.path)).toEqual(['/z'])
  })
})

describe('ledgerAfter', () => {
  it('stamps read files with the run id, keeps unchanged ones with their new stat, drops deleted ones', () => {
    const discovered: StatFile[] = [
      { path: '/lake/site=north/e.parquet', size: 50, mtimeMs: 9000 },
      { path: '/lake/site=north/c.parquet', size: 300, mtimeMs: 3500 },
      { path: '/lake/site=north/b.parquet', size: 210, mtimeMs: 2500 },
      { path: '/lake/site=north/a.parquet', size: 100, mtimeMs: 1000 },
    ]
    const fps = new Map([
      ['/lake/site=north/e.parquet', 'fe'],
      ['/lake/site=north/c.parquet', 'fc'],
      ['/lake/site=north/b.parquet', 'fb2'],
    ])
    expect(ledgerAfter(planFiles(discovered, ledger, fps), 'run-2')).toEqual([
      entry('/lake/site=north/a.parquet', 100, 1000, 'fa'),
      { ...entry('/lake/site=north/b.parquet', 210, 2500, 'fb2'), runId: 'run-2' },
      entry('/lake/site=north/c.parquet', 300, 3500, 'fc'),
      { ...entry('/lake/site=north/e.parquet', 50, 9000, 'fe'), runId: 'run-2' },
    ])
  })

  it('records the window span of files read this run and keeps the span of unchanged files', () => {
    const spanned = { ...entry('/lake/site=north/a.parquet', 100, 1000, 'fa'), windows: [10, 20] as const }
    const discovered: StatFile[] = [
      { path: '/lake/site=north/a.parquet', size: 100, mtimeMs: 1000 },
      { path: '/lake/site=north/b.parquet', size: 200, mtimeMs: 2000 },
      { path: '/lake/site=north/n.parquet', size: 5, mtimeMs: 5 },
    ]
    const plan = planFiles(
      discovered,
      [spanned, ledger[1] as LedgerEntry],
      new Map([['/lake/site=north/n.parquet', 'fn']]),
    )
    const after = ledgerAfter(plan, 'run-2', new Map([['/lake/site=north/n.parquet', [30, 40] as const]]))
    expect(after.map((e) => [e.path, e.windows ?? null])).toEqual([
      ['/lake/site=north/a.parquet', [10, 20]],
      ['/lake/site=north/b.parquet', null],
      ['/lake/site=north/n.parquet', [30, 40]],
    ])
  })

  it('refuses a read file without a fingerprint', () => {
    const plan = planFiles([{ path: '/new.parquet', size: 1, mtimeMs: 1 }], [])
    expect(() => ledgerAfter(plan, 'run-2')).toThrow('no fingerprint for /new.parquet; fingerprint it before planning')
  })
})

describe('entriesTouching', () => {
  it('keeps entries whose span holds a window start, and entries with no span', () => {
    const e = (name: string, windows: readonly [number, number] | null | undefined) => ({ name, windows })
    const entries = [
      e('before', [0, 9]),
      e('holds', [10, 30]),
      e('after', [31, 50]),
      e('unknown', null),
      e('old', undefined),
    ]
    expect(entriesTouching(entries, [30, 12]).map((x) => x.name)).toEqual(['holds', 'unknown', 'old'])
    expect(entriesTouching(entries, [9, 31]).map((x) => x.name)).toEqual(['before', 'after', 'unknown', 'old'])
    expect(entriesTouching(entries, []).map((x) => x.name)).toEqual(['unknown', 'old'])
  })
})

describe('entriesUnchanged', () => {
  const asFound = (e: LedgerEntry): StatFile => ({ path: e.path, size: e.size, mtimeMs: e.mtimeMs })

  it('is true when every ledger file is found as it was, and then ledgerAfter gives the same entries', () => {
    const plan = planFiles(ledger.map(asFound), ledger)
    expect(entriesUnchanged(plan, ledger)).toBe(true)
    expect(ledgerAfter(plan, 'run-2')).toEqual(ledger)
  })

  it('is false when a file is new, deleted, rewritten or only touched', () => {
    const found = ledger.map(asFound)
    const added = [...found, { path: '/lake/site=south/z.arrow', size: 1, mtimeMs: 1 }]
    expect(entriesUnchanged(planFiles(added, ledger, new Map([['/lake/site=south/z.arrow', 'fz']])), ledger)).toBe(
      false,
    )
    expect(entriesUnchanged(planFiles(found.slice(1), ledger), ledger)).toBe(false)
    const rewritten = found.map((f, i) => (i === 0 ? { ...f, size: f.size + 1 } : f))
    expect(entriesUnchanged(planFiles(rewritten, ledger, new Map([[found[0]?.path ?? '', 'new']])), ledger)).toBe(false)
    // A touch keeps the content (same fingerprint) but the ledger must record the new mtime.
    const touched = found.map((f, i) => (i === 0 ? { ...f, mtimeMs: f.mtimeMs + 1 } : f))
    const touchPlan = planFiles(touched, ledger, new Map([[found[0]?.path ?? '', 'fa']]))
    expect(touchPlan.unchanged.length).toBe(ledger.length)
    expect(entriesUnchanged(touchPlan, ledger)).toBe(false)
  })
})
