import { type Logger, pino } from 'pino'

export type { Logger } from 'pino'

/** Paths pino redacts wherever they appear in a log object: webhook URLs, secrets, auth headers. */
export const redactPaths = [
  'url',
  '*.url',
  'secret',
  '*.secret',
  'headers.authorization',
  '*.headers.authorization',
  'webhook-signature',
  '*.webhook-signature',
]

export interface LoggerOptions {
  /** pino level name (default `info`; `SLOPESHIFT_LOG_LEVEL` overrides in the CLI). */
  readonly level?: string
  /** File descriptor to write to (default 2, stderr: stdout is for the `--json` summary). */
  readonly fd?: number
  /**
   * Where the lines go instead of `fd`: an object whose `write` takes whole lines and writes them at once (the
   * CLI's terminal status line, which keeps its progress display below them).
   */
  readonly destination?: { write(chunk: string): void }
}

/**
 * Creates the one root logger: JSON on stderr with synchronous writes, so the last line before an
 * exit is never lost, and with secrets redacted.
 */
export function createLogger(options: LoggerOptions = {}): Logger {
  return pino(
    {
      level: options.level ?? 'info',
      base: { app: 'slopeshift' },
      redact: { paths: redactPaths, censor: '[redacted]' },
    },
    options.destination ?? pino.destination({ dest: options.fd ?? 2, sync: true }),
  )
}

/** A logger that drops everything (tests and library use). */
export function silentLogger(): Logger {
  return pino({ level: 'silent' })
}
