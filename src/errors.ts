/**
 * Expected failures of the worker. Each subclass has a stable `code` (never renamed once
 * published) and a BSD sysexits `exitCode`, so an orchestrator can tell "fix it" from "retry later".
 * Anything thrown that is not a SlopeshiftError is a bug and exits 70.
 */

/** BSD `sysexits.h` codes used by the CLI (style.md 4.3). */
export const ExitCode = {
  ok: 0,
  usage: 64,
  dataErr: 65,
  noInput: 66,
  software: 70,
  cantCreat: 73,
  ioErr: 74,
  tempFail: 75,
  config: 78,
  sigint: 130,
  sigterm: 143,
} as const
export type ExitCodeValue = (typeof ExitCode)[keyof typeof ExitCode]

/** Structured context carried by an error; never holds secrets. */
export interface ErrorContext {
  readonly file?: string
  readonly column?: string
  readonly key?: string
  readonly [extra: string]: unknown
}

export interface SlopeshiftErrorOptions {
  readonly context?: ErrorContext
  readonly cause?: unknown
}

/** Base class of every failure the worker expects. */
export class SlopeshiftError extends Error {
  readonly code: string
  readonly exitCode: ExitCodeValue
  readonly context: ErrorContext

  constructor(code: string, exitCode: ExitCodeValue, message: string, options: SlopeshiftErrorOptions = {}) {
    super(message, options.cause === undefined ? undefined : { cause: options.cause })
    this.name = new.target.name
    this.code = code
    this.exitCode = exitCode
    this.context = options.context ?? {}
  }
}

/** Bad flags or unknown command (exit 64). */
export class UsageError extends SlopeshiftError {
  constructor(message: string, options?: SlopeshiftErrorOptions) {
    super('SLOPESHIFT_USAGE', ExitCode.usage, message, options)
  }
}

/** The config file is missing keys, has wrong types, or cannot be parsed (exit 78). */
export class ConfigError extends SlopeshiftError {
  constructor(message: string, options?: SlopeshiftErrorOptions) {
    super('SLOPESHIFT_CONFIG', ExitCode.config, message, options)
  }
}

/** An input file is malformed: wrong column type, corrupt bytes, non-finite state (exit 65). */
export class DataError extends SlopeshiftError {
  constructor(message: string, options?: SlopeshiftErrorOptions) {
    super('SLOPESHIFT_DATA', ExitCode.dataErr, message, options)
  }
}

/** Required input is missing: no files found, a column absent from a file (exit 66). */
export class NoInputError extends SlopeshiftError {
  constructor(message: string, options?: SlopeshiftErrorOptions) {
    super('SLOPESHIFT_NO_INPUT', ExitCode.noInput, message, options)
  }
}

/** Output could not be created (exit 73). */
export class CantCreateError extends SlopeshiftError {
  constructor(message: string, options?: SlopeshiftErrorOptions) {
    super('SLOPESHIFT_CANT_CREATE', ExitCode.cantCreat, message, options)
  }
}

/** Output or input I/O failed mid-way (exit 74). */
export class IoError extends SlopeshiftError {
  constructor(message: string, options?: SlopeshiftErrorOptions) {
    super('SLOPESHIFT_IO', ExitCode.ioErr, message, options)
  }
}

/** A remote peer (webhook, lock holder, remote engine) is unavailable; retry later (exit 75). */
export class TempFailError extends SlopeshiftError {
  constructor(code: string, message: string, options?: SlopeshiftErrorOptions) {
    super(code, ExitCode.tempFail, message, options)
  }
}

/** The run was stopped by a signal; nothing partial was committed (exit 130 / 143). */
export class StoppedError extends SlopeshiftError {
  constructor(signal: 'SIGINT' | 'SIGTERM') {
    super(
      'SLOPESHIFT_STOPPED',
      signal === 'SIGINT' ? ExitCode.sigint : ExitCode.sigterm,
      `run stopped by ${signal}; work not yet committed was discarded (committed results and queued digests stay), rerun to continue`,
    )
  }
}

/** Maps any thrown value to the exit code the CLI should use. */
export function exitCodeOf(err: unknown): ExitCodeValue {
  return err instanceof SlopeshiftError ? err.exitCode : ExitCode.software
}
