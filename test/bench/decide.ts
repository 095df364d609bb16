/**
 * Issue 3: 1,000,000 series through shift tests + Benjamini–Hochberg + verdicts in one window
 * family (`decideWindowFamily`, built module from dist/). Candidate moments come from invented,
 * seeded rows pushed through the real kernel (`accumulateRows` with the lag block), so the serial
 * adjustment has real lag blocks to work on. Only `decideWindowFamily` is timed; building the
 * candidates is reported separately.
 */
import path from 'node:path'
import { constants, type PerformanceEntry, PerformanceObserver } from 'node:perf_hooks'
import { pathToFileURL } from 'node:url'
import { mulberry32 } from '../helpers/prng.js'
import { fmt, median, printTable, projectRoot } from './lib.js'

type Accumulate = typeof import('../../src/kernel/accumulate.js')
type Verdict = typeof import('../../src/decide/verdict.js')
type Schema = typeof import('../../src/config/schema.js')
type ShiftCandidate = import('../../src/decide/verdict.js').ShiftCandidate

export interface DecideOptions {
  readonly series: number
  /** Points per window (x = 0 … points − 1 minutes of an hourly window). */
  readonly points: number
  readonly seed: number
  readonly reps: number
}

export interface DecideResult {
  readonly series: number
  readonly pointsPerWindow: number
  readonly buildMs: number
  readonly modes: {
    readonly serial: string
    readonly test: string
    readonly wallMs: number[]
    readonly medianMs: number
    /** Process CPU time (user + system) during the call: less sensitive to other load than wall time. */
    readonly cpuMs: number[]
    readonly medianCpuMs: number
    /**
     * Garbage-collection pauses during the call (perf_hooks `gc` entries), major (mark-compact and
     * incremental steps) and minor (scavenge). A major GC marks the whole heap, and most of that heap
     * is the candidates built above: its cost grows with them, not with the decision code.
     */
    readonly gcMajorMs: number[]
    readonly gcMinorMs: number[]
    readonly verdicts: Record<string, number>
  }[]
  readonly targetMs: number
}

async function importDist<T>(rel: string): Promise<T> {
  return (await import(pathToFileURL(path.join(projectRoot, 'dist', rel)).href)) as T
}

/**
 * Builds one candidate per series: baseline = previous hour, current = this hour, `points` rows each
 * in time order. y = level + slope·x + AR(1) noise (ρ 0.3); 1 % of the series change slope.
 */
function buildCandidates(acc: Accumulate, opts: DecideOptions): ShiftCandidate[] {
  const rand = mulberry32(opts.seed)
  const gauss = (): number => {
    // Irwin–Hall approximation (sum of 4 uniforms), exact arithmetic, no libm
    return (rand() + rand() + rand() + rand() - 2) * Math.sqrt(3)
  }
  const slots = new acc.MomentSlots({ weighted: false, trackLag: true })
  const seriesPerBatch = 4096
  const batchRows = seriesPerBatch * 2 * opts.points
  const slot = new Int32Array(batchRows)
  const x = new Float64Array(batchRows)
  const y = new Float64Array(batchRows)
  for (let first = 0; first < opts.series; first += seriesPerBatch) {
    const count = Math.min(seriesPerBatch, opts.series - first)
    let r = 0
    for (let s = 0; s < count; s++) {
      const level = 3 + 10 * rand()
      const slope = (rand() - 0.5) * 0.02
      const shifted = rand() < 0.01
      for (let w = 0; w < 2; w++) {
        const k = slots.addSlot()
        const b = w === 1 && shifted ? slope + 0.02 : slope
        let e = 0
        for (let i = 0; i < opts.points; i++) {
          e = 0.3 * e + 0.2 * gauss()
          slot[r] = k
          x[r] = i
          y[r] = level + b * i + e
          r++
        }
      }
    }
    acc.accumulateRows(slots, { length: r, slot, x, y, weight: null })
  }
  const out: ShiftCandidate[] = new Array(opts.series)
  for (let s = 0; s < opts.series; s++) {
    out[s] = { baseline: [acc.slotMoments(slots, 2 * s)], current: acc.slotMoments(slots, 2 * s + 1) }
  }
  return out
}

/** GC pause time by kind within [from, to) (performance.now() clock). */
function gcPauses(entries: readonly PerformanceEntry[], from: number, to: number): { major: number; minor: number } {
  let major = 0
  let minor = 0
  for (const e of entries) {
    if (e.startTime < from || e.startTime >= to) continue
    const kind = (e as PerformanceEntry & { readonly detail?: { readonly kind?: number } }).detail?.kind
    if (kind === constants.NODE_PERFORMANCE_GC_MINOR) minor += e.duration
    else if (kind === constants.NODE_PERFORMANCE_GC_MAJOR || kind === constants.NODE_PERFORMANCE_GC_INCREMENTAL) {
      major += e.duration
    }
  }
  return { major, minor }
}

/** Resolves after queued performance entries have reached their observers. */
function drainEntries(): Promise<void> {
  return new Promise((resolve) => setTimeout(resolve, 10))
}

/** Runs the section and prints its table. */
export async function benchDecide(opts: DecideOptions): Promise<DecideResult> {
  const acc = await importDist<Accumulate>('kernel/accumulate.js')
  const verdict = await importDist<Verdict>('decide/verdict.js')
  const schema = await importDist<Schema>('config/schema.js')
  const t0 = performance.now()
  const candidates = buildCandidates(acc, opts)
  const buildMs = performance.now() - t0
  const modes: DecideResult['modes'][number][] = []
  const gcEntries: PerformanceEntry[] = []
  const observer = new PerformanceObserver((list) => {
    gcEntries.push(...list.getEntries())
  })
  observer.observe({ entryTypes: ['gc'] })
  for (const serial of ['ar1', 'off'] as const) {
    const detect = schema.configSchema.shape.detect.parse({ serial })
    const wallMs: number[] = []
    const cpuMs: number[] = []
    const gcMajorMs: number[] = []
    const gcMinorMs: number[] = []
    let counts: Record<string, number> = {}
    for (let rep = 0; rep < opts.reps; rep++) {
      const cpu0 = process.cpuUsage()
      const t = performance.now()
      const decisions = verdict.decideWindowFamily(candidates, detect)
      const end = performance.now()
      wallMs.push(end - t)
      const cpu = process.cpuUsage(cpu0)
      cpuMs.push((cpu.user + cpu.system) / 1000)
      await drainEntries()
      const gc = gcPauses(gcEntries, t, end)
      gcMajorMs.push(gc.major)
      gcMinorMs.push(gc.minor)
      counts = {}
      for (const d of decisions) counts[d.verdict] = (counts[d.verdict] ?? 0) + 1
    }
    modes.push({
      serial,
      test: detect.test,
      wallMs,
      medianMs: median(wallMs),
      cpuMs,
      medianCpuMs: median(cpuMs),
      gcMajorMs,
      gcMinorMs,
      verdicts: counts,
    })
  }
  observer.disconnect()
  printTable(
    `decide: ${opts.series.toLocaleString('en-US')} series × 1 window family (${opts.points} points per window), decideWindowFamily in-process; candidates built in ${fmt(buildMs / 1000, 2)} s (not timed below)`,
    [
      'test / serial',
      'wall s (each rep)',
      'median wall s',
      'median CPU s',
      'GC pauses s major + minor (each rep)',
      'target ≤ 5 s',
      'verdicts',
    ],
    modes.map((m) => [
      `${m.test} / ${m.serial}`,
      m.wallMs.map((v) => fmt(v / 1000, 2)).join(', '),
      fmt(m.medianMs / 1000, 2),
      fmt(m.medianCpuMs / 1000, 2),
      m.gcMajorMs.map((v, i) => `${fmt(v / 1000, 2)} + ${fmt((m.gcMinorMs[i] ?? 0) / 1000, 2)}`).join(', '),
      m.medianMs <= 5000 ? 'met' : m.medianCpuMs <= 5000 ? 'met in CPU time only' : 'missed',
      Object.entries(m.verdicts)
        .map(([k, v]) => `${k} ${v}`)
        .join(', '),
    ]),
  )
  return { series: opts.series, pointsPerWindow: opts.points, buildMs, modes, targetMs: 5000 }
}
