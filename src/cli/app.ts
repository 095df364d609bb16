/**
 * The yargs command tree. Thin: each command validates flags, loads the config and hands over to
 * a function in `commands/`. yargs runs strict, never exits the process, and its failures become
 * UsageError (exit 64).
 */
import yargs, { type Argv } from 'yargs'
import { UsageError } from '../errors.js'
import { checkConfigCommand } from './commands/check-config.js'
import { demoCommand } from './commands/demo.js'
import { explainCommand } from './commands/explain.js'
import { notifyCommand } from './commands/notify.js'
import { runCommand } from './commands/run.js'
import type { CliDeps } from './deps.js'

/** Builds the CLI for `argv` (without node and script). */
export function buildCli(argv: readonly string[], deps: CliDeps): Argv {
  const cli = yargs([...argv])
    .scriptName('slopeshift')
    .usage('$0 <command> [options]\n\nPer-series trend lines per time window, and alerts when a trend shifts.')
    .command(runCommand(deps))
    .command(checkConfigCommand(deps))
    .command(demoCommand(deps))
    .command(explainCommand(deps))
    .command(notifyCommand(deps))
    .demandCommand(1, 'name a command, e.g. `slopeshift run --config job.yaml`')
    .strict()
    .exitProcess(false)
    .fail((msg, err) => {
      if (err) throw err
      throw new UsageError(`${msg}; see slopeshift --help`)
    })
    .help()
    .version()
    .wrap(Math.min(120, process.stdout.columns ?? 100))
  skipHelpCache(cli)
  return cli
}

/**
 * Before it runs a command's handler, yargs renders that command's whole help text and keeps it, to
 * print if an async handler fails. Our `.fail()` throws instead of printing help, so the text is never
 * used, and rendering it measures every line's display width: ~15 ms of each start-up (35 ms on a busy
 * machine). `--help` renders its text afresh, so it is unchanged. When a yargs release renames this
 * internal method, the lookup misses and nothing changes but the speed.
 */
function skipHelpCache(cli: Argv): void {
  const internals = (cli as unknown as { getInternalMethods?: () => { getUsageInstance?: () => unknown } })
    .getInternalMethods
  const usage = internals?.call(cli).getUsageInstance?.()
  if (usage !== null && typeof usage === 'object' && 'cacheHelpMessage' in usage) {
    ;(usage as { cacheHelpMessage: () => void }).cacheHelpMessage = () => undefined
  }
}
