#!/usr/bin/env node
/**
 * The slopeshift binary. Parses argv, builds the deps (logger, signal, clock), runs one command
 * and maps errors to BSD sysexits codes (style.md 4.3). The only file that sets the exit code. The shipped
 * entry `dist/bundle/slopeshift.js` (launch.ts) runs this module from the bundle `dist/bundle/cli.cjs`.
 */
import { writeSync } from 'node:fs'
import { ExitCode, exitCodeOf, SlopeshiftError, StoppedError } from '../errors.js'
import { createLogger } from '../log.js'
import { buildCli } from './app.js'
import type { CliDeps } from './deps.js'
import { StatusLine } from './status-line.js'

async function main(argv: readonly string[]): Promise<void> {
  // On a terminal, log lines go through the status line so that a progress display stays below them.
  const statusLine = process.stderr.isTTY === true ? new StatusLine((chunk) => writeSync(2, chunk)) : null
  const log = createLogger({
    level: process.env.SLOPESHIFT_LOG_LEVEL ?? 'info',
    ...(statusLine === null ? {} : { destination: statusLine }),
  })
  const controller = new AbortController()
  const onSignal = (signal: 'SIGINT' | 'SIGTERM') => {
    if (controller.signal.aborted) {
      log.fatal({ signal }, 'second signal received, exiting now')
      process.exit(signal === 'SIGINT' ? ExitCode.sigint : ExitCode.sigterm)
    }
    log.warn({ signal }, 'stop requested, finishing the current file')
    controller.abort(signal)
  }
  process.on('SIGINT', () => onSignal('SIGINT'))
  process.on('SIGTERM', () => onSignal('SIGTERM'))
  const deps: CliDeps = {
    log,
    stdout: (text) => process.stdout.write(text),
    signal: controller.signal,
    now: Date.now,
    statusLine,
    setExitCode: (code) => {
      process.exitCode = code
    },
  }
  try {
    await buildCli(argv, deps).parseAsync()
  } catch (err) {
    // A failure after a stop request is the stop itself (an interrupted query, an aborted read).
    const final = controller.signal.aborted
      ? new StoppedError(controller.signal.reason === 'SIGINT' ? 'SIGINT' : 'SIGTERM')
      : err
    const code = exitCodeOf(final)
    if (final instanceof SlopeshiftError) {
      log.fatal({ err: final, code: final.code, exitCode: code, ...final.context }, final.message)
    } else {
      log.fatal({ err: final, exitCode: code }, 'unexpected error (a bug): please report it with this log line')
    }
    process.exitCode = code
  }
}

// Exit as soon as the command is done and stdout has drained: waiting for the event loop to empty
// only adds engine teardown (freeing the embedded database's buffers, joining its threads) to every
// run's wall time. Every file and table was closed by the command itself. (A promise chain, not a
// top-level await: the shipped bundle is a CommonJS script, see launch.ts.)
void main(process.argv.slice(2)).then(() => process.stdout.write('', () => process.exit()))
