import path from 'node:path'
import type { CommandModule } from 'yargs'
import type { CliDeps } from '../deps.js'

interface Args {
  readonly config: string
  readonly 'dry-run': boolean
  readonly json: boolean
}

/**
 * `slopeshift notify`: delivers the digests waiting in the outbox (left by runs whose webhook was
 * down), or with `--dry-run` prints them without sending. Exits 75 when some stay undelivered.
 */
export function notifyCommand(deps: CliDeps): CommandModule<object, Args> {
  return {
    command: 'notify',
    describe: 'send the digests waiting in the outbox (--dry-run: print them instead)',
    builder: (y) =>
      y
        .option('config', { type: 'string', demandOption: true, describe: 'YAML or JSON config file' })
        .option('dry-run', { type: 'boolean', default: false, describe: 'print what would be sent; send nothing' })
        .option('json', { type: 'boolean', default: false, describe: 'print JSON on stdout' }),
    handler: async (args) => {
      const [{ loadConfig }, { flushOutbox, undeliveredError }, { pending }] = await Promise.all([
        import('../../config/load.js'),
        import('../../notify/flush.js'),
        import('../../notify/outbox.js'),
      ])
      const { config } = await loadConfig(args.config)
      const root = config.output.root
      if (args['dry-run']) {
        const notices = await pending(root, deps)
        if (args.json) {
          deps.stdout(`${JSON.stringify(notices.map(({ file, ...n }) => ({ ...n, file: path.basename(file) })))}\n`)
          return
        }
        if (notices.length === 0) deps.stdout('nothing waiting in the outbox\n')
        for (const n of notices) {
          deps.stdout(
            `--- ${n.webhook} (${n.format}, webhook-id ${n.id}, queued ${new Date(n.createdAtMs).toISOString()})\n`,
          )
          deps.stdout(`${renderBody(n.body, n.format)}\n`)
        }
        return
      }
      const flushed = await flushOutbox(
        root,
        { webhooks: config.notify.webhooks, maxAgeHours: config.notify.maxAgeHours },
        { log: deps.log, signal: deps.signal, now: deps.now },
      )
      const { notices: _notices, ...counts } = flushed
      deps.stdout(args.json ? `${JSON.stringify(counts)}\n` : `${JSON.stringify(counts, null, 2)}\n`)
      const err = undeliveredError(flushed)
      if (err !== null) throw err
    },
  }
}

/** The readable part of a body: the `text` field of a text payload, else pretty JSON. */
function renderBody(body: string, format: string): string {
  try {
    const parsed = JSON.parse(body) as { text?: unknown }
    if (format === 'text' && typeof parsed.text === 'string') return parsed.text
    return JSON.stringify(parsed, null, 2)
  } catch {
    return body
  }
}
