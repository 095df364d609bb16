import type { CommandModule } from 'yargs'
import type { Config } from '../../config/schema.js'
import { discoverInWorker } from '../../dataset/discover-thread.js'
import { dropEarlyDiscovery, takeEarlyDiscovery } from '../../dataset/early-discovery.js'
import { UsageError } from '../../errors.js'
import { discoverOptionsOf } from '../../pipeline/plan.js'
import type { RunSummary } from '../../pipeline/summary.js'
import type { CliDeps } from '../deps.js'
import { createProgress } from '../progress.js'

interface Args {
  readonly config: string
  readonly json: boolean
  readonly progress: boolean
  readonly full: boolean
  readonly from: string | undefined
  readonly to: string | undefined
  readonly verify: boolean
  readonly 'lock-wait': number | undefined
  readonly deliver: boolean
  readonly 'fail-on-shift': boolean
}

/** `slopeshift run`: one incremental, idempotent run of the job. */
export function runCommand(deps: CliDeps): CommandModule<object, Args> {
  return {
    command: 'run',
    describe: 'read new and changed partitions, update fits and shift tests, write tables, send digests',
    builder: (y) =>
      y
        .option('config', { type: 'string', demandOption: true, describe: 'YAML or JSON config file' })
        .option('json', { type: 'boolean', default: false, describe: 'print the run summary as JSON on stdout' })
        .option('progress', { type: 'boolean', default: false, describe: 'show a progress line on a terminal' })
        .option('full', { type: 'boolean', default: false, describe: 'ignore the ledger and rebuild from every file' })
        .option('from', { type: 'string', describe: 'also recompute windows from this instant (ISO 8601), with --to' })
        .option('to', { type: 'string', describe: 'end (exclusive) of the --from range (ISO 8601)' })
        .option('verify', {
          type: 'boolean',
          default: false,
          describe: 'fingerprint every file, even when size and modification time are unchanged',
        })
        .option('lock-wait', {
          type: 'number',
          describe:
            'seconds to wait for another run on the same output root before exiting 75 (default: output.lockWaitSeconds)',
        })
        .option('deliver', {
          type: 'boolean',
          default: true,
          describe: 'send digests now (--no-deliver leaves them in the outbox for the next run)',
        })
        .option('fail-on-shift', {
          type: 'boolean',
          default: false,
          describe: 'exit 1 when any series shifted (default: shifts are success, exit 0)',
        }),
    handler: async (args) => {
      const range = timeRange(args.from, args.to)
      // Loaded on demand: `--help`, `--version` and other commands start without the engines.
      const { loadConfig } = await import('../../config/load.js')
      let config: Config
      try {
        config = (await loadConfig(args.config)).config
      } catch (err) {
        dropEarlyDiscovery()
        throw err
      }
      // List the inputs in a worker thread while this one loads the engines (10,000 folders: ~0.3 s); the
      // CLI entry may have started that already, from a quick read of the config (early-discovery.ts).
      const expected = { inputs: config.source.paths, options: discoverOptionsOf(config) }
      const early = takeEarlyDiscovery(args.config, expected)
      const discovery =
        early === null
          ? discoverInWorker(expected.inputs, expected.options)
          : early.then((found) => {
              deps.log.debug({ used: found !== null }, 'early input listing checked')
              return found ?? discoverInWorker(expected.inputs, expected.options)
            })
      discovery.catch(() => undefined) // the run reports it; a run that fails earlier must not crash on it
      const { runJob } = await import('../../pipeline/run.js')
      const progress = createProgress(deps.log, args.progress ? deps.statusLine : null, deps.now)
      let summary: RunSummary
      try {
        summary = await runJob(
          config,
          {
            full: args.full,
            verify: args.verify,
            lockWaitMs: Math.max(0, args['lock-wait'] ?? config.output.lockWaitSeconds) * 1000,
            noDeliver: !args.deliver,
            ...range,
          },
          { ...deps, onRows: progress.onRows, onScan: progress.onScan, discovery },
        )
      } finally {
        progress.done()
      }
      deps.stdout(args.json ? `${JSON.stringify(summary)}\n` : `${renderSummary(summary)}\n`)
      if (args['fail-on-shift'] && summary.shifts > 0) deps.setExitCode(1)
    },
  }
}

/** Parses `--from/--to` (both or neither) into epoch ms. */
export function timeRange(from: string | undefined, to: string | undefined): { fromMs?: number; toMs?: number } {
  if (from === undefined && to === undefined) return {}
  if (from === undefined || to === undefined) throw new UsageError('--from and --to go together; give both or neither')
  const fromMs = Date.parse(from)
  const toMs = Date.parse(to)
  if (!Number.isFinite(fromMs) || !Number.isFinite(toMs) || !(toMs > fromMs)) {
    throw new UsageError(`--from ${from} --to ${to} is not a range of ISO 8601 instants with from < to`)
  }
  return { fromMs, toMs }
}

/** A short human-readable summary. */
export function renderSummary(s: RunSummary): string {
  return [
    `run ${s.run_id} (${s.job}): ${s.status} in ${(s.duration_ms / 1000).toFixed(1)} s`,
    `files: ${s.files.read} read, ${s.files.skipped} unchanged, ${s.files.deleted} deleted; rows: ${s.rows.read} read, ${s.rows.skipped} skipped`,
    `series: ${s.series}; windows: ${s.windows.total} (${s.windows.open} open); shifts: ${s.shifts}`,
    `tables: ${s.output.fits}, ${s.output.shifts}, ${s.output.runs}`,
  ].join('\n')
}
