import path from 'node:path'
import type { CommandModule } from 'yargs'
import type { Config } from '../../config/schema.js'
import { UsageError } from '../../errors.js'
import { windowStartOf } from '../../kernel/window.js'
import { baselineLabel, windowSpecOf } from '../../pipeline/plan.js'
import { type FitRow, type SeriesKey, type ShiftRow, seriesId } from '../../types.js'
import type { CliDeps } from '../deps.js'

interface Args {
  readonly config: string
  readonly series: string
  readonly window: string | undefined
  readonly json: boolean
}

/** `slopeshift explain`: why one series got its verdict in one window, from the published tables. */
export function explainCommand(deps: CliDeps): CommandModule<object, Args> {
  return {
    command: 'explain',
    describe: 'show the fits, test and rule behind one series verdict',
    builder: (y) =>
      y
        .option('config', { type: 'string', demandOption: true, describe: 'YAML or JSON config file' })
        .option('series', { type: 'string', demandOption: true, describe: 'key values, e.g. site=site-04,unit=c1' })
        .option('window', { type: 'string', describe: 'an instant or date inside the window (default: latest tested)' })
        .option('json', { type: 'boolean', default: false, describe: 'print JSON on stdout' }),
    handler: async (args) => {
      const [{ loadConfig }, { readTable }] = await Promise.all([
        import('../../config/load.js'),
        import('../../tables/read.js'),
      ])
      const { config } = await loadConfig(args.config)
      const key = parseSeries(args.series, config.source.keys)
      const id = seriesId(key)
      const root = config.output.root
      const fits = (await readTable('fits', path.join(root, 'fits'), config.source.keys)).filter(
        (f) => seriesId(f.key) === id,
      )
      const shifts = (await readTable('shifts', path.join(root, 'shifts'), config.source.keys)).filter(
        (s) => seriesId(s.key) === id,
      )
      if (fits.length === 0) {
        throw new UsageError(
          `no fits for series ${args.series} under ${root}; check --series and that a run has completed`,
        )
      }
      const shift = pickShift(shifts, config, args.window)
      const windowStart = shift?.window_start ?? pickWindowStart(fits, config, args.window)
      const fit = fits.find((f) => f.window_start === windowStart) ?? null
      const baseline =
        shift?.baseline_start == null
          ? []
          : fits.filter((f) => f.window_start >= (shift.baseline_start as number) && f.window_start < windowStart)
      const result = { series: Object.fromEntries(config.source.keys.map((k, i) => [k, key[i]])), fit, baseline, shift }
      deps.stdout(args.json ? `${JSON.stringify(result)}\n` : `${render(result, config)}\n`)
    },
  }
}

/** Parses `k=v,k=v` into a key in config order; every key column must be named once. */
export function parseSeries(text: string, keys: readonly string[]): SeriesKey {
  const pairs = new Map<string, string>()
  for (const part of text.split(',')) {
    const eq = part.indexOf('=')
    if (eq <= 0) throw new UsageError(`--series ${text}: "${part}" is not name=value`)
    pairs.set(part.slice(0, eq).trim(), part.slice(eq + 1).trim())
  }
  const missing = keys.filter((k) => !pairs.has(k))
  const extra = [...pairs.keys()].filter((k) => !keys.includes(k))
  if (missing.length > 0 || extra.length > 0) {
    throw new UsageError(
      `--series must name each key column (${keys.join(', ')}) once; got ${[...pairs.keys()].join(', ')}`,
    )
  }
  return keys.map((k) => pairs.get(k) as string)
}

function instantOf(text: string): number {
  const t = Date.parse(text)
  if (!Number.isFinite(t)) throw new UsageError(`--window ${text} is not an ISO 8601 date or instant`)
  return t
}

function pickShift(shifts: readonly ShiftRow[], config: Config, window: string | undefined): ShiftRow | null {
  if (window === undefined) return shifts.at(-1) ?? null
  const start = windowStartOf(windowSpecOf(config), instantOf(window))
  return shifts.find((s) => s.window_start === start) ?? null
}

function pickWindowStart(fits: readonly FitRow[], config: Config, window: string | undefined): number {
  if (window === undefined) return (fits.at(-1) as FitRow).window_start
  return windowStartOf(windowSpecOf(config), instantOf(window))
}

function num(x: number | null, digits = 4): string {
  return x === null ? '—' : Math.abs(x) >= 1e-3 || x === 0 ? x.toFixed(digits) : x.toExponential(2)
}

function render(
  r: { series: Record<string, unknown>; fit: FitRow | null; baseline: readonly FitRow[]; shift: ShiftRow | null },
  config: Config,
): string {
  const unit = config.window.xUnit
  const line = (label: string, f: FitRow) =>
    `  ${label.padEnd(9)} ${new Date(f.window_start).toISOString()}  n ${f.n}  slope ${num(f.slope)} ± ${num(f.slope_se)} per ${unit}  r2 ${num(f.r2, 3)}  r1 ${num(f.r1, 3)}  ${f.window_state}`
  const out = [`series ${JSON.stringify(r.series)}`]
  if (r.fit !== null) out.push('fit:', line('window', r.fit))
  if (r.baseline.length > 0) {
    out.push(`baseline (${baselineLabel(config)}):`)
    for (const b of r.baseline) out.push(line('baseline', b))
  }
  const s = r.shift
  if (s === null) out.push('no test for this window (open, or no shift row)')
  else {
    out.push(
      `test: ${s.test} (serial ${s.serial}; n_eff ${num(s.n_eff_new, 1)} vs ${num(s.n_eff_base, 1)})`,
      `  slope ${num(s.slope)} vs baseline ${num(s.baseline_slope)}: Δ ${num(s.delta)} ± ${num(s.delta_se)}, ratio ${num(s.ratio, 2)}`,
      `  statistic ${num(s.statistic, 3)}, df ${num(s.df, 1)}, p ${num(s.p_value)}, q ${num(s.q_value)}`,
      `verdict: ${s.verdict} — ${s.reason}`,
    )
  }
  return out.join('\n')
}
