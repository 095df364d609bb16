import { existsSync } from 'node:fs'
import { readFile } from 'node:fs/promises'
import path from 'node:path'
import { fileURLToPath } from 'node:url'
import type { CommandModule } from 'yargs'
import type { CliDeps } from '../deps.js'
import { createProgress } from '../progress.js'
import { renderSummary } from './run.js'

interface Args {
  readonly dir: string
  readonly json: boolean
}

/** The caution printed with every demo and carried by every digest. */
export const advisory =
  'Advisory only: trend shifts are statistical evidence, not a safety system. Verify on site and follow local codes and licensed practice before acting.'

/** `slopeshift demo`: writes the invented fleet lake, runs the job on it, prints where the tables are. */
export function demoCommand(deps: CliDeps): CommandModule<object, Args> {
  return {
    command: 'demo',
    describe: 'generate an invented demo lake (refrigerated sites, compressor power), run the job on it',
    builder: (y) =>
      y
        .option('dir', { type: 'string', default: 'demo-out', describe: 'folder for the demo lake and tables' })
        .option('json', { type: 'boolean', default: false, describe: 'print the run summary as JSON on stdout' }),
    handler: async (args) => {
      const dir = path.resolve(args.dir)
      const [{ writeDemoLake }, { parseConfigText, resolveConfig }, { runJob }, { readTable }] = await Promise.all([
        import('../../demo/write.js'),
        import('../../config/load.js'),
        import('../../pipeline/run.js'),
        import('../../tables/read.js'),
      ])
      const lake = await writeDemoLake(path.join(dir, 'lake'))
      deps.log.info(
        { dir: lake.dataDir, parquetRows: lake.parquetRows, arrowRows: lake.arrowRows },
        'demo lake written',
      )
      const configFile = packageFile(path.join('config', 'demo.yaml'))
      const raw = parseConfigText(await readFile(configFile, 'utf8'), configFile)
      const config = resolveConfig(raw, configFile, {
        overrides: {
          'source.paths': [path.join(dir, 'lake', 'parquet'), path.join(dir, 'lake', 'arrow')],
          'output.root': path.join(dir, 'tables'),
        },
      })
      const progress = createProgress(deps.log, deps.statusLine, deps.now)
      const summary = await runJob(
        config,
        { full: true },
        { ...deps, onRows: progress.onRows, onScan: progress.onScan },
      ).finally(progress.done)
      if (args.json) {
        deps.stdout(`${JSON.stringify(summary)}\n`)
        return
      }
      const fits = await readTable('fits', summary.output.fits, config.source.keys)
      const steepest = [...fits]
        .filter((f) => f.slope !== null && f.window_state === 'closed')
        .sort((a, b) => Math.abs(b.slope ?? 0) - Math.abs(a.slope ?? 0))
        .slice(0, 5)
      const lines = [
        renderSummary(summary),
        '',
        'steepest daily trends (kW per hour):',
        ...steepest.map(
          (f) =>
            `  ${f.key.join('/')}  ${new Date(f.window_start).toISOString().slice(0, 10)}  slope ${(f.slope ?? 0).toFixed(4)} ± ${(f.slope_se ?? 0).toFixed(4)}  (n ${f.n})`,
        ),
        '',
        `query them: duckdb -c "SELECT * FROM read_parquet('${summary.output.fits}/*/*.parquet', hive_partitioning=true) LIMIT 5"`,
        '',
        advisory,
      ]
      deps.stdout(`${lines.join('\n')}\n`)
    },
  }
}

/**
 * A file shipped with the package (`config/demo.yaml`), found from the nearest folder above this
 * module that holds `package.json`: the same from `dist/cli/commands/` and from the bundle in `dist/`.
 */
function packageFile(relative: string): string {
  const here = path.dirname(fileURLToPath(import.meta.url))
  for (let dir = here; ; dir = path.dirname(dir)) {
    if (existsSync(path.join(dir, 'package.json'))) return path.join(dir, relative)
    if (path.dirname(dir) === dir)
      throw new Error(`no package.json above ${here}: the slopeshift install is incomplete`)
  }
}
