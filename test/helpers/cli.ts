/**
 * Spawns the built CLI (the shipped bundle `dist/bundle/slopeshift.js`, or the file named by `SLOPESHIFT_CLI`) and collects what it did:
 * exit code, signal, stdout, stderr, the last JSON line of stderr (pino's final log line) and the `--json`
 * summary on stdout. Integration tests use it to check exit codes and messages end to end (style.md 4.3, 4.6).
 */
import { type ChildProcess, spawn } from 'node:child_process'
import { existsSync } from 'node:fs'
import path from 'node:path'
import { fileURLToPath } from 'node:url'
import type { RunSummary } from '../../src/pipeline/summary.js'

/** Project root (two folders above this file). */
export const projectRoot = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '..', '..')

/** The CLI entry the tests spawn: `SLOPESHIFT_CLI` when set, else the shipped bundle `dist/bundle/slopeshift.js`. */
export const cliPath = process.env.SLOPESHIFT_CLI ?? path.join(projectRoot, 'dist', 'bundle', 'slopeshift.js')

/** True when the CLI has been built (`npm run build`); tests skip visibly otherwise. */
export const hasBuiltCli = existsSync(cliPath)

/** Reason shown when the CLI is not built. */
export const noCliReason = `built CLI ${cliPath} is missing: run \`npm run build\` first`

/** What one CLI process did. */
export interface CliResult {
  /** Exit code, or null when a signal ended the process. */
  readonly code: number | null
  readonly signal: NodeJS.Signals | null
  readonly stdout: string
  readonly stderr: string
  /** The last stderr line that parses as a JSON object (the final pino log line), or null. */
  readonly lastLog: Record<string, unknown> | null
  /** Every stderr line that parses as a JSON object, in order. */
  readonly logs: readonly Record<string, unknown>[]
  /** The last stdout line parsed as a run summary (`--json`), or null. */
  readonly summary: RunSummary | null
  /** Wall time from spawn to exit, ms. */
  readonly durationMs: number
  /** Epoch ms at spawn and at exit (comparable with the `time` field of the log lines). */
  readonly spawnedAtMs: number
  readonly exitedAtMs: number
}

export interface CliOptions {
  /** Extra environment variables (merged over the test process environment). */
  readonly env?: Readonly<Record<string, string>>
  readonly cwd?: string
  /** Kill the process with SIGKILL after this long (default 60 s), so a hung CLI fails the test instead. */
  readonly timeoutMs?: number
}

/** A spawned CLI process and the promise of its result. */
export interface CliProcess {
  readonly child: ChildProcess
  readonly result: Promise<CliResult>
  /** Resolves when the first stderr line containing `text` appears (never rejects; resolves false on exit). */
  waitForLog(text: string): Promise<boolean>
}

/** Starts `node <cli> ...args`; the caller may signal `child` and awaits `result`. */
export function spawnCli(args: readonly string[], options: CliOptions = {}): CliProcess {
  const started = performance.now()
  const spawnedAtMs = Date.now()
  const child = spawn(process.execPath, [cliPath, ...args], {
    cwd: options.cwd ?? projectRoot,
    env: { ...process.env, SLOPESHIFT_LOG_LEVEL: 'debug', ...options.env },
    stdio: ['ignore', 'pipe', 'pipe'],
  })
  let stdout = ''
  let stderr = ''
  const waiters: { text: string; resolve: (found: boolean) => void }[] = []
  child.stdout?.setEncoding('utf8').on('data', (d: string) => {
    stdout += d
  })
  child.stderr?.setEncoding('utf8').on('data', (d: string) => {
    stderr += d
    for (let i = waiters.length - 1; i >= 0; i--) {
      const w = waiters[i]
      if (w !== undefined && stderr.includes(w.text)) {
        waiters.splice(i, 1)
        w.resolve(true)
      }
    }
  })
  const timer = setTimeout(() => child.kill('SIGKILL'), options.timeoutMs ?? 60_000)
  const result = new Promise<CliResult>((resolve, reject) => {
    child.on('error', reject)
    child.on('close', (code, signal) => {
      clearTimeout(timer)
      for (const w of waiters.splice(0)) w.resolve(false)
      const logs = jsonLines(stderr)
      resolve({
        code,
        signal,
        stdout,
        stderr,
        logs,
        lastLog: logs.at(-1) ?? null,
        summary: (jsonLines(stdout).at(-1) as RunSummary | undefined) ?? null,
        durationMs: performance.now() - started,
        spawnedAtMs,
        exitedAtMs: Date.now(),
      })
    })
  })
  return {
    child,
    result,
    waitForLog: (text) =>
      stderr.includes(text) || child.exitCode !== null || child.signalCode !== null
        ? Promise.resolve(stderr.includes(text))
        : new Promise((resolve) => waiters.push({ text, resolve })),
  }
}

/** Runs the CLI to completion. */
export function runCli(args: readonly string[], options: CliOptions = {}): Promise<CliResult> {
  return spawnCli(args, options).result
}

/** Lines of `text` that parse as JSON objects. */
export function jsonLines(text: string): Record<string, unknown>[] {
  const out: Record<string, unknown>[] = []
  for (const line of text.split('\n')) {
    const t = line.trim()
    if (!t.startsWith('{')) continue
    try {
      const v: unknown = JSON.parse(t)
      if (typeof v === 'object' && v !== null && !Array.isArray(v)) out.push(v as Record<string, unknown>)
    } catch {
      // not JSON: a human-readable line
    }
  }
  return out
}

/** A one-line description of a result for assertion messages (exit code and the last log message). */
export function describeResult(r: CliResult): string {
  const msg = r.lastLog?.msg
  return `exit ${r.code ?? r.signal}: ${typeof msg === 'string' ? msg : r.stderr.slice(-400)}`
}
