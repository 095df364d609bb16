/**
 * Bench helpers: paths, whole-process timing with peak RSS, medians and plain-text tables.
 * Benchmarks print and record figures; they never assert (style.md §4.6).
 */
import { spawn } from 'node:child_process'
import { existsSync } from 'node:fs'
import { loadavg } from 'node:os'
import path from 'node:path'
import { fileURLToPath } from 'node:url'

/** Project root (two levels above test/bench). */
export const projectRoot = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '..', '..')
/** Cache and results folder (git-ignored). */
export const benchDir = path.join(projectRoot, '.bench')
/** The built CLI. */
export const cliPath = path.join(projectRoot, 'dist', 'bundle', 'slopeshift.js')

/** GNU time, when installed: gives the child's peak RSS without touching it. */
export const gnuTime = '/usr/bin/time'

/** How peak RSS is measured in this run. */
export const rssMethod = existsSync(gnuTime)
  ? '/usr/bin/time -v "Maximum resident set size" of the child process'
  : 'process.resourceUsage().maxRSS of a node -e wrapper around the child (includes the wrapper)'

/** One whole-process measurement. */
export interface ProcessRun {
  /** Wall time from spawn to exit, measured by the parent with performance.now(). */
  readonly wallMs: number
  /** Epoch ms (Date.now()) just before the spawn and at exit: to place the child's own log times. */
  readonly startedAtMs: number
  readonly endedAtMs: number
  /** Peak resident set size of the child, MB (1 MB = 1024 kB as GNU time reports kB). */
  readonly peakRssMb: number | null
  /** User + system CPU seconds of the child (GNU time); less sensitive to a busy machine than wall time. */
  readonly cpuS: number | null
  /** 1-minute load average when the child started (a shared machine makes wall times noisy). */
  readonly load1: number
  readonly exitCode: number | null
  /** True when the run was stopped by `timeoutMs` (SIGTERM to its process group). */
  readonly timedOut: boolean
  readonly stdout: string
  readonly stderr: string
}

/**
 * Spawns `command args` as a whole process and measures wall time and peak RSS. With GNU time
 * present, the child runs under `/usr/bin/time -v` and its report is cut from the end of stderr.
 */
export async function runProcess(
  command: string,
  args: readonly string[],
  options: { readonly cwd?: string; readonly env?: NodeJS.ProcessEnv; readonly timeoutMs?: number } = {},
): Promise<ProcessRun> {
  const useTime = existsSync(gnuTime)
  const argv = useTime ? ['-v', command, ...args] : [...args]
  const exe = useTime ? gnuTime : command
  const load1 = loadavg()[0] ?? 0
  const startedAtMs = Date.now()
  const started = performance.now()
  const child = spawn(exe, argv, {
    cwd: options.cwd ?? projectRoot,
    env: options.env ?? process.env,
    stdio: ['ignore', 'pipe', 'pipe'],
    // own process group, so a timeout can stop GNU time and the measured child together
    detached: options.timeoutMs !== undefined,
  })
  let timedOut = false
  const timer =
    options.timeoutMs === undefined
      ? null
      : setTimeout(() => {
          timedOut = true
          if (child.pid !== undefined) process.kill(-child.pid, 'SIGTERM')
        }, options.timeoutMs)
  const out: Buffer[] = []
  const err: Buffer[] = []
  child.stdout.on('data', (b: Buffer) => out.push(b))
  child.stderr.on('data', (b: Buffer) => err.push(b))
  const exitCode = await new Promise<number | null>((resolve, reject) => {
    child.on('error', reject)
    child.on('close', (code) => resolve(code))
  })
  if (timer !== null) clearTimeout(timer)
  const wallMs = performance.now() - started
  const endedAtMs = Date.now()
  let stderr = Buffer.concat(err).toString('utf8')
  let peakRssMb: number | null = null
  let cpuS: number | null = null
  if (useTime) {
    let at = stderr.lastIndexOf('\tCommand being timed:')
    const exited = stderr.lastIndexOf('Command exited with non-zero status')
    if (exited >= 0 && exited < at) at = exited
    const signalled = stderr.lastIndexOf('Command terminated by signal')
    if (signalled >= 0 && signalled < at) at = signalled
    const report = at >= 0 ? stderr.slice(at) : ''
    if (at >= 0) stderr = stderr.slice(0, at)
    const m = /Maximum resident set size \(kbytes\): (\d+)/.exec(report)
    if (m?.[1] !== undefined) peakRssMb = Number(m[1]) / 1024
    const user = /User time \(seconds\): ([\d.]+)/.exec(report)?.[1]
    const sys = /System time \(seconds\): ([\d.]+)/.exec(report)?.[1]
    if (user !== undefined && sys !== undefined) cpuS = Number(user) + Number(sys)
  }
  const stdout = Buffer.concat(out).toString('utf8')
  return { wallMs, startedAtMs, endedAtMs, peakRssMb, cpuS, load1, exitCode, timedOut, stdout, stderr }
}

/** Median of a non-empty list. */
export function median(xs: readonly number[]): number {
  const s = [...xs].sort((a, b) => a - b)
  const mid = s.length >> 1
  return s.length % 2 === 1 ? (s[mid] as number) : ((s[mid - 1] as number) + (s[mid] as number)) / 2
}

/** Max of a list, or null when it holds no numbers. */
export function maxOrNull(xs: readonly (number | null)[]): number | null {
  const v = xs.filter((x): x is number => x !== null)
  return v.length === 0 ? null : Math.max(...v)
}

/** Formats a number with a fixed number of decimals; null as '–'. */
export function fmt(x: number | null | undefined, digits = 1): string {
  return x === null || x === undefined || !Number.isFinite(x) ? '–' : x.toFixed(digits)
}

/** Prints a plain-text table (first column left-aligned, the rest right-aligned). */
/** How a child that did not succeed ended: its exit code and the last line of its stderr. */
export function failureOf(run: ProcessRun): string {
  return `exit ${run.exitCode}: ${lastLine(run.stderr).slice(0, 300)}`
}

/** `name ms, name ms, …` of a record of milliseconds, rounded, in its order. */
export function msList(record: Readonly<Record<string, number>>): string {
  return Object.entries(record)
    .map(([name, ms]) => `${name} ${fmt(ms, 0)}`)
    .join(', ')
}

export function printTable(title: string, header: readonly string[], rows: readonly (readonly string[])[]): void {
  const widths = header.map((h, i) => Math.max(h.length, ...rows.map((r) => (r[i] ?? '').length)))
  const line = (cells: readonly string[]): string =>
    cells.map((c, i) => (i === 0 ? c.padEnd(widths[i] ?? 0) : c.padStart(widths[i] ?? 0))).join('  ')
  console.log(`\n${title}`)
  console.log(line(header))
  console.log(widths.map((w) => '-'.repeat(w)).join('  '))
  for (const r of rows) console.log(line(r))
}

/** Last non-empty line of a text (for error reports). */
export function lastLine(text: string): string {
  const lines = text.trim().split('\n')
  return lines[lines.length - 1] ?? ''
}
