/**
 * Builds the digest of a run (design.md "digest") from its `shifts/` rows and renders it as chat
 * text. Pure: no clock, no I/O; the same rows always give the same digest and the same id.
 */
import { createHash } from 'node:crypto'
import type { XUnit } from '../kernel/window.js'
import { type SeriesKey, type ShiftRow, seriesId } from '../types.js'
import {
  type Digest,
  type DigestChange,
  type DigestShift,
  digestSchemaVersion,
  type VerdictCounts,
} from './digest-schema.js'

/** The advisory line every digest carries. */
export const cautionLine =
  'Advisory: a trend shift is statistical evidence from recorded data, not a safety system. ' +
  'Check the equipment on site and follow local codes and licensed practice before acting.'

/**
 * Slopes within a factor of this of each other read as "N× faster/slower"; beyond it the smaller
 * one reads as "(nearly) level" (`started` / `stopped`). A wording choice, not a statistical rule.
 */
export const levelFactor = 100

/** What {@link buildDigest} needs from a run. */
export interface DigestInput {
  readonly job: string
  readonly runId: string
  /** Key column names in config order (labels for `ShiftRow.key`). */
  readonly keyColumns: readonly string[]
  /** Slopes are per this unit. */
  readonly xUnit: XUnit
  /** Unit label of the metric (e.g. `kW`); omitted from the text when absent. */
  readonly yUnit?: string | null
  /** IANA time zone of the windows (config `window.timeZone`); the text shows window bounds in it. Default UTC. */
  readonly timeZone?: string
  /** Every `shifts/` row the run wrote (all verdicts): verdict counts and tested windows come from these. */
  readonly rows: readonly ShiftRow[]
  /**
   * The `shift` rows cleared for notice by cooldown (see `filterByCooldown`). Defaults to every row of
   * `rows` with verdict `shift`. Shift rows of `rows` missing here count as held by cooldown.
   */
  readonly notify?: readonly ShiftRow[]
  /** How many shifts to list (the rest are counted). */
  readonly topN: number
  /** Send a digest when there is no shift to report (and at least one series was tested). */
  readonly sendAllClear: boolean
  /** Absolute URL of this run's HTML report; pass it only once the report file exists. */
  readonly reportUrl?: string | null
}

/**
 * Builds the digest of a run, or null when there is nothing to say: no shift cleared for notice and
 * no all-clear wanted (or nothing tested at all — an all-clear about zero series says nothing).
 *
 * Shifts are ranked by q-value (ascending, null last), then |delta| (descending, null last), then
 * series id and window start, so ties are broken the same way on every run. The id is a hash of the
 * job and the (series, window, verdict) entries the digest reports — never the run id — so a rerun
 * over the same tables yields the same `webhook-id` and a receiver can drop the redelivery.
 */
export function buildDigest(input: DigestInput): Digest | null {
  const notify = (input.notify ?? input.rows).filter((r) => r.verdict === 'shift')
  const counts = countVerdicts(input.rows)
  const shiftRowsTotal = counts.shift
  const heldByCooldown = Math.max(0, shiftRowsTotal - notify.length)
  if (notify.length === 0 && (!input.sendAllClear || input.rows.length === 0)) return null

  const kind: Digest['kind'] = notify.length > 0 ? 'shifts' : 'all-clear'
  const ranked = [...notify].sort(compareShiftRows)
  const listed = ranked.slice(0, Math.max(0, input.topN))
  const shifts = listed.map((row, i) => toDigestShift(row, i + 1, input))
  const about = kind === 'shifts' ? ranked : input.rows

  return {
    schemaVersion: digestSchemaVersion,
    id: digestIdOf(input.job, kind, about),
    kind,
    job: input.job,
    runId: input.runId,
    xUnit: input.xUnit,
    yUnit: input.yUnit ?? null,
    keyColumns: [...input.keyColumns],
    timeZone: input.timeZone ?? 'UTC',
    windows: distinctWindows(input.rows),
    counts,
    shiftTotal: notify.length,
    heldByCooldown,
    shifts,
    reportUrl: input.reportUrl ?? null,
    caution: cautionLine,
  }
}

/**
 * Content-derived digest id: `dg_` + 32 hex digits of SHA-256 over the job, the kind and the sorted
 * (series id, window start, window end, verdict) entries. Order of `rows` does not matter.
 */
export function digestIdOf(job: string, kind: Digest['kind'], rows: readonly ShiftRow[]): string {
  const entries = rows.map((r) => JSON.stringify([seriesId(r.key), r.window_start, r.window_end, r.verdict])).sort()
  const hash = createHash('sha256')
  hash.update(JSON.stringify(['slopeshift-digest', digestSchemaVersion, job, kind]))
  for (const e of entries) hash.update(`\n${e}`)
  return `dg_${hash.digest('hex').slice(0, 32)}`
}

/** Counts rows per verdict. */
export function countVerdicts(rows: readonly ShiftRow[]): VerdictCounts {
  const counts = { shift: 0, steady: 0, thin: 0, flat: 0 }
  for (const r of rows) counts[r.verdict] += 1
  return counts
}

/** Ranking order of shifts: q-value ↑, |delta| ↓, series id, window start (nulls last). */
export function compareShiftRows(a: ShiftRow, b: ShiftRow): number {
  const q = compareNullable(a.q_value, b.q_value)
  if (q !== 0) return q
  const d = compareNullable(absOrNull(b.delta), absOrNull(a.delta), true)
  if (d !== 0) return d
  const ka = seriesId(a.key)
  const kb = seriesId(b.key)
  if (ka !== kb) return ka < kb ? -1 : 1
  return a.window_start - b.window_start
}

/** How a slope moved from `before` to `after`, and the current direction. */
export interface SlopeChange {
  readonly direction: DigestShift['direction']
  readonly change: DigestChange
  /** |after / before| when the slopes share a sign and neither is (nearly) level; otherwise null. */
  readonly factor: number | null
}

/**
 * Classifies a slope change. Same sign: `accelerated` / `slowed` by |after/before|; opposite signs:
 * `reversed`; a slope within {@link levelFactor} of zero relative to the other reads as level, giving
 * `started` (level → moving) or `stopped` (moving → level).
 */
export function classifyChange(before: number | null, after: number | null): SlopeChange {
  if (before === null || after === null || !Number.isFinite(before) || !Number.isFinite(after)) {
    const direction = after === null || !Number.isFinite(after) ? 'level' : directionOf(after)
    return { direction, change: 'unknown', factor: null }
  }
  const direction = directionOf(after)
  const absBefore = Math.abs(before)
  const absAfter = Math.abs(after)
  const beforeLevel = absBefore === 0 || absBefore * levelFactor <= absAfter
  const afterLevel = absAfter === 0 || absAfter * levelFactor <= absBefore
  if (beforeLevel && afterLevel) return { direction, change: 'unknown', factor: null }
  if (beforeLevel) return { direction, change: 'started', factor: null }
  if (afterLevel) return { direction: 'level', change: 'stopped', factor: null }
  if (Math.sign(before) !== Math.sign(after)) return { direction, change: 'reversed', factor: null }
  const factor = absAfter / absBefore
  return { direction, change: factor >= 1 ? 'accelerated' : 'slowed', factor }
}

/**
 * The plain-language line of one shift, e.g. `rising 3.4× faster than the previous window`,
 * `flattened: still falling, 2.1× slower than the previous window`, `reversed: now rising, was falling`.
 */
export function describeShift(before: number | null, after: number | null, baseline: string): string {
  const c = classifyChange(before, after)
  const than = baseline === 'previous window' ? 'the previous window' : `the baseline (${baseline})`
  const was = before === null ? 'level' : directionOf(before)
  switch (c.change) {
    case 'accelerated':
      return `${c.direction} ${formatFactor(c.factor ?? 1)} faster than ${than}`
    case 'slowed':
      return `flattened: still ${c.direction}, ${formatFactor(1 / (c.factor ?? 1))} slower than ${than}`
    case 'reversed':
      return `reversed: now ${c.direction}, was ${was}`
    case 'started':
      return `started ${c.direction}; ${than} was (nearly) level`
    case 'stopped':
      return `flattened: now (nearly) level, was ${was}`
    case 'unknown':
      return `slope changed against ${than}`
  }
}

/**
 * Renders the digest as chat text: headline, verdict counts, the listed shifts (series and window,
 * plain-language line, slope before → after with units, ratio, q-value), report link, caution.
 */
export function renderText(digest: Digest): string {
  const lines: string[] = []
  const c = digest.counts
  const countLine = `${plural(c.shift, 'shift')} · ${c.steady} steady · ${c.thin} thin · ${c.flat} flat`
  const held = digest.heldByCooldown > 0 ? ` (${digest.heldByCooldown} held by cooldown)` : ''
  if (digest.kind === 'shifts') {
    lines.push(`slopeshift · ${digest.job}: ${plural(digest.shiftTotal, 'trend shift')} to review`)
  } else {
    lines.push(`slopeshift · ${digest.job}: all clear, no new trend shifts`)
  }
  lines.push(`${countLine}${held} · ${windowsLabel(digest)} · run ${digest.runId}`)
  for (const s of digest.shifts) {
    lines.push('')
    lines.push(`${s.rank}. ${keyLabel(s.key)} · ${rangeLabel(s.windowStart, s.windowEnd, digest.timeZone)}`)
    lines.push(`   ${s.summary}`)
    const unit = digest.yUnit === null ? `per ${digest.xUnit}` : `${digest.yUnit} per ${digest.xUnit}`
    const parts = [`slope ${formatNumber(s.slopeBefore)} → ${formatNumber(s.slopeAfter)} ${unit}`]
    if (s.ratio !== null) parts.push(`ratio ${formatNumber(s.ratio)}`)
    parts.push(`q ${formatQ(s.qValue)}`)
    lines.push(`   ${parts.join(' · ')}`)
  }
  const more = digest.shiftTotal - digest.shifts.length
  if (more > 0) lines.push('', `…and ${plural(more, 'more shift')}${digest.reportUrl === null ? '' : ' in the report'}`)
  lines.push('')
  if (digest.reportUrl !== null) lines.push(`Report: ${digest.reportUrl}`)
  lines.push(digest.caution)
  return lines.join('\n')
}

/** Formats a number with 3 significant digits, plain notation between 1e-4 and 1e6; `n/a` for null. */
export function formatNumber(v: number | null): string {
  if (v === null || !Number.isFinite(v)) return 'n/a'
  if (v === 0) return '0'
  const abs = Math.abs(v)
  if (abs >= 1e6 || abs < 1e-4) return v.toExponential(2)
  return String(Number(v.toPrecision(3)))
}

function toDigestShift(row: ShiftRow, rank: number, input: DigestInput): DigestShift {
  const c = classifyChange(row.baseline_slope, row.slope)
  return {
    rank,
    key: keyRecord(row.key, input.keyColumns),
    seriesId: seriesId(row.key),
    windowStart: isoOf(row.window_start),
    windowEnd: isoOf(row.window_end),
    baseline: row.baseline,
    slopeBefore: finiteOrNull(row.baseline_slope),
    slopeAfter: finiteOrNull(row.slope),
    delta: finiteOrNull(row.delta),
    ratio: finiteOrNull(row.ratio),
    qValue: finiteOrNull(row.q_value),
    pValue: finiteOrNull(row.p_value),
    direction: c.direction,
    change: c.change,
    summary: describeShift(row.baseline_slope, row.slope, row.baseline),
  }
}

function keyRecord(key: SeriesKey, columns: readonly string[]): Record<string, string | null> {
  const out: Record<string, string | null> = {}
  key.forEach((value, i) => {
    out[columns[i] ?? `key${i + 1}`] = value
  })
  return out
}

function distinctWindows(rows: readonly ShiftRow[]): Digest['windows'] {
  const seen = new Map<string, { start: number; end: number }>()
  for (const r of rows) seen.set(`${r.window_start}/${r.window_end}`, { start: r.window_start, end: r.window_end })
  return [...seen.values()]
    .sort((a, b) => a.start - b.start || a.end - b.end)
    .map((w) => ({ start: isoOf(w.start), end: isoOf(w.end) }))
}

function windowsLabel(digest: Digest): string {
  const first = digest.windows[0]
  const last = digest.windows[digest.windows.length - 1]
  if (first === undefined || last === undefined) return 'no windows tested'
  if (digest.windows.length === 1) return `window ${rangeLabel(first.start, first.end, digest.timeZone)}`
  return `${digest.windows.length} windows ${rangeLabel(first.start, last.end, digest.timeZone)}`
}

/**
 * Window bounds in the digest's time zone: `2026-11-23 → 2026-11-30` when both are local midnights,
 * else `2026-11-23 06:00 → 12:00`; a zone other than UTC is named (`… Europe/Berlin`), and UTC is
 * named only when times are shown. The end is exclusive, as everywhere in slopeshift.
 */
function rangeLabel(startIso: string, endIso: string, timeZone: string): string {
  const a = localDateTime(startIso, timeZone)
  const b = localDateTime(endIso, timeZone)
  const midnight = a.time === '00:00' && b.time === '00:00'
  let text: string
  if (midnight) text = `${a.date} → ${b.date}`
  else if (a.date === b.date) text = `${a.date} ${a.time} → ${b.time}`
  else text = `${a.date} ${a.time} → ${b.date} ${b.time}`
  if (timeZone !== 'UTC') return `${text} ${timeZone}`
  return midnight ? text : `${text} UTC`
}

function localDateTime(iso: string, timeZone: string): { date: string; time: string } {
  const parts = new Intl.DateTimeFormat('en-CA', {
    timeZone,
    year: 'numeric',
    month: '2-digit',
    day: '2-digit',
    hour: '2-digit',
    minute: '2-digit',
    hourCycle: 'h23',
  }).formatToParts(new Date(iso))
  const get = (type: Intl.DateTimeFormatPartTypes): string => parts.find((p) => p.type === type)?.value ?? '??'
  return { date: `${get('year')}-${get('month')}-${get('day')}`, time: `${get('hour')}:${get('minute')}` }
}

function keyLabel(key: Readonly<Record<string, string | null>>): string {
  return Object.entries(key)
    .map(([k, v]) => `${k}=${v ?? '(null)'}`)
    .join(', ')
}

function formatFactor(f: number): string {
  return `${f >= 10 ? String(Math.round(f)) : f.toFixed(1)}×`
}

function formatQ(q: number | null): string {
  if (q === null) return 'n/a'
  if (q < 1e-4) return '< 0.0001'
  return String(Number(q.toPrecision(2)))
}

function plural(n: number, word: string): string {
  return `${n} ${word}${n === 1 ? '' : 's'}`
}

function directionOf(v: number): DigestShift['direction'] {
  return v > 0 ? 'rising' : v < 0 ? 'falling' : 'level'
}

function isoOf(ms: number): string {
  return new Date(ms).toISOString()
}

function finiteOrNull(v: number | null): number | null {
  return v !== null && Number.isFinite(v) ? v : null
}

function absOrNull(v: number | null): number | null {
  return v === null || !Number.isFinite(v) ? null : Math.abs(v)
}

/** Ascending order with nulls last; `descendingInputs` keeps nulls last when the caller swapped a and b. */
function compareNullable(a: number | null, b: number | null, descendingInputs = false): number {
  if (a === null && b === null) return 0
  if (a === null) return descendingInputs ? -1 : 1
  if (b === null) return descendingInputs ? 1 : -1
  return a - b
}
