import type { CommandModule } from 'yargs'
import { loadConfig } from '../../config/load.js'
import { runJob } from '../../pipeline/run.js'
import type { RunSummary } from '../../pipeline/summary.js'
import type { CliDeps } from '../deps.js'
import { createProgress } from '../progress.js'

interface Args {
  readonly config: string
  readonly json: boolean
  readonly progress: boolean
  readonly full: boolean
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
        .option('fail-on-shift', {
          type: 'boolean',
          default: false,
          describe: 'exit 1 when any series shifted (default: shifts are success, exit 0)',
        }),
    handler: async (args) => {
      const { config } = await loadConfig(args.config)
      const progress = createProgress(deps.log, args.progress && deps.isTty, deps.now)
      let summary: RunSummary
      try {
        summary = await runJob(config, { full: args.full }, { ...deps, onRows: progress.onRows })
      } finally {
        progress.done()
      }
      deps.stdout(args.json ? `${JSON.stringify(summary)}\n` : `${renderSummary(summary)}\n`)
      if (args['fail-on-shift'] && summary.shifts > 0) deps.setExitCode(1)
    },
  }
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
