/** The machine-readable summary of one run (`--json` on stdout) and its `runs/` row. */
import type { RunRow, ShiftRow, Verdict } from '../types.js'

/** Verdict counts of one window family. */
export interface WindowVerdicts {
  /** ISO 8601 UTC start of the window. */
  readonly window_start: string
  readonly counts: Readonly<Record<Verdict, number>>
}

export interface RunSummary {
  readonly run_id: string
  readonly job: string
  readonly status: RunRow['status']
  readonly error: string | null
  readonly started_at: string
  readonly ended_at: string
  readonly duration_ms: number
  readonly files: {
    readonly new: number
    readonly changed: number
    readonly deleted: number
    readonly skipped: number
    readonly read: number
    readonly ignored: number
  }
  readonly rows: { readonly read: number; readonly skipped: number }
  readonly series: number
  readonly windows: { readonly total: number; readonly open: number; readonly remerged: number }
  readonly verdicts: readonly WindowVerdicts[]
  readonly shifts: number
  readonly notices: { readonly sent: number; readonly pending: number }
  readonly output: { readonly root: string; readonly fits: string; readonly shifts: string; readonly runs: string }
}

/** The `runs/` row of a summary. */
export function runRowOf(s: RunSummary): RunRow {
  return {
    run_id: s.run_id,
    job: s.job,
    started_at: Date.parse(s.started_at),
    ended_at: Date.parse(s.ended_at),
    status: s.status,
    error: s.error,
    files_new: s.files.new,
    files_changed: s.files.changed,
    files_deleted: s.files.deleted,
    files_skipped: s.files.skipped,
    files_read: s.files.read,
    rows_read: s.rows.read,
    rows_skipped: s.rows.skipped,
    series: s.series,
    windows: s.windows.total,
    windows_remerged: s.windows.remerged,
    shifts: s.shifts,
    notices_sent: s.notices.sent,
    notices_pending: s.notices.pending,
  }
}

/** A run id that sorts by start time: `r20261201T230512Z-3fa9`. */
export function newRunId(nowMs: number, random: () => number = Math.random): string {
  const stamp = new Date(nowMs)
    .toISOString()
    .replace(/[-:]/g, '')
    .replace(/\.\d+Z$/, 'Z')
  const tail = Math.floor(random() * 0x10000)
    .toString(16)
    .padStart(4, '0')
  return `r${stamp}-${tail}`
}

/** Verdict counts per window, sorted by window start. */
export function verdictCounts(shifts: readonly ShiftRow[]): WindowVerdicts[] {
  const by = new Map<number, { shift: number; steady: number; thin: number; flat: number }>()
  for (const s of shifts) {
    let c = by.get(s.window_start)
    if (c === undefined) {
      c = { shift: 0, steady: 0, thin: 0, flat: 0 }
      by.set(s.window_start, c)
    }
    c[s.verdict] += 1
  }
  return [...by.entries()]
    .sort((a, b) => a[0] - b[0])
    .map(([start, counts]) => ({ window_start: new Date(start).toISOString(), counts }))
}
