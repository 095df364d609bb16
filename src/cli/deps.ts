import type { Logger } from '../log.js'
import type { StatusLine } from './status-line.js'

/** What every command gets from `main.ts`: no command creates its own logger, clock or signal. */
export interface CliDeps {
  readonly log: Logger
  /** Writes one chunk of machine-readable output to stdout. */
  readonly stdout: (text: string) => void
  /** Aborted on SIGINT/SIGTERM; its `reason` is the signal name. */
  readonly signal: AbortSignal
  readonly now: () => number
  /** The status line of stderr when it is a terminal (progress display allowed), else null. */
  readonly statusLine: StatusLine | null
  /** Sets the process exit code for a successful command that must still signal something (e.g. `--fail-on-shift`). */
  readonly setExitCode: (code: number) => void
}
