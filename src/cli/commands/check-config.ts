import type { CommandModule } from 'yargs'
import type { CliDeps } from '../deps.js'

interface Args {
  readonly config: string
}

/** Prints the resolved config (defaults filled in, secrets masked) and exits 0, or 78 with every problem. */
export function checkConfigCommand(deps: CliDeps): CommandModule<object, Args> {
  return {
    command: 'check-config',
    describe: 'validate a config file and print it with defaults filled in',
    builder: (y) => y.option('config', { type: 'string', demandOption: true, describe: 'YAML or JSON config file' }),
    handler: async (args) => {
      const { loadConfig } = await import('../../config/load.js')
      const { config, file } = await loadConfig(args.config)
      const masked = {
        ...config,
        notify: {
          ...config.notify,
          webhooks: config.notify.webhooks.map((w) => ({
            ...w,
            url: '[redacted]',
            ...(w.secret !== undefined ? { secret: '[redacted]' } : {}),
          })),
        },
      }
      deps.stdout(`${JSON.stringify({ file, valid: true, config: masked }, null, 2)}\n`)
      deps.log.info({ file }, 'config valid')
    },
  }
}
