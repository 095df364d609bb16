/**
 * The config: single source of its types, defaults and units. `schemas/config.schema.json` is
 * generated from this (`npm run schemas`) and a test keeps the two in step.
 */
import { z } from 'zod'
import { isValidTimeZone, parseWindow } from '../kernel/window.js'

const columnName = z.string().min(1, 'must be a column name')

export const xUnitSchema = z.enum(['ms', 's', 'minute', 'hour', 'day', 'week'])

const sourceSchema = z
  .object({
    paths: z
      .array(z.string().min(1))
      .min(1, 'list at least one folder, file or glob')
      .describe(
        'Folders (walked recursively), files or globs (*, **, ?). Relative paths resolve from the config file.',
      ),
    format: z
      .enum(['auto', 'parquet', 'arrow'])
      .default('auto')
      .describe('auto: by extension and magic bytes (.parquet; .arrow/.feather IPC file; .arrows IPC stream)'),
    keys: z
      .array(columnName)
      .min(1, 'name at least one key column')
      .describe('Columns whose values together identify a series; Hive folder segments (name=value) count as columns'),
    x: z
      .object({
        column: columnName,
        epochUnit: z
          .enum(['s', 'ms', 'us', 'ns'])
          .default('ms')
          .describe(
            'For numeric x columns only: the unit of the epoch number. Timestamp columns carry their own unit.',
          ),
      })
      .strict(),
    y: z.object({ column: columnName }).strict(),
    weight: z
      .object({
        column: columnName,
        kind: z
          .enum(['precision', 'frequency'])
          .default('precision')
          .describe('precision: w ∝ 1/variance, df = n − 2; frequency: a row stands for w samples, df = Σw − 2'),
      })
      .strict()
      .optional(),
  })
  .strict()

const windowSchema = z
  .object({
    size: z
      .string()
      .refine((s) => parseWindow(s) !== null, {
        message: 'must be a fixed size like 15m, 6h, 1d, 7d, 2w or a calendar unit day, isoweek, month',
      })
      .describe('Fixed sizes align to the Unix epoch; calendar units follow timeZone'),
    timeZone: z
      .string()
      .default('UTC')
      .refine(isValidTimeZone, { message: 'must be an IANA time zone such as UTC or Europe/Berlin' }),
    xUnit: xUnitSchema.default('hour').describe('x is time since the window start in this unit; slopes are per xUnit'),
  })
  .strict()

const detectSchema = z
  .object({
    test: z
      .enum(['welch', 'pooled', 'chow'])
      .default('welch')
      .describe('welch: Welch–Satterthwaite (default); pooled: interaction t test; chow: Chow F test'),
    serial: z
      .enum(['ar1', 'ar1_mild', 'off'])
      .default('ar1')
      .describe('Lag-1 effective-sample-size adjustment when rows are in time order (statistics.md §5.4)'),
    serialFallbackRho: z.number().min(0).max(0.99).default(0),
    baselineWindows: z.number().int().min(1).max(52).default(1),
    baselineKind: z.enum(['common-slope', 'merged-line']).default('common-slope'),
    fdrQ: z.number().gt(0).lt(1).default(0.05),
    fdrMethod: z.enum(['bh', 'by']).default('bh'),
    minPoints: z.number().int().min(3).default(20),
    minNEff: z.number().min(3).default(6),
    minRelChange: z.number().min(0).default(0.25),
    minAbsChange: z.number().min(0).default(0).describe('y-units per xUnit; 0 = off'),
    direction: z.enum(['both', 'up', 'down']).default('both'),
    allowedLatenessMs: z
      .number()
      .int()
      .min(0)
      .default(0)
      .describe('A window is closed once its end ≤ watermark = latest timestamp seen − allowedLatenessMs'),
    watermark: z.enum(['data', 'clock']).default('data').describe('data: latest timestamp seen; clock: the run time'),
  })
  .strict()

const projectionSchema = z
  .object({
    limit: z.number().optional().describe('Level T whose crossing time is projected (statistics.md §6.2)'),
    warnSpans: z.number().positive().default(1),
    maxSpans: z.number().positive().default(3),
    confidence: z.number().gt(0).lt(1).default(0.95),
  })
  .strict()

const outputSchema = z
  .object({
    root: z.string().min(1).describe('Folder that receives fits/, shifts/, runs/ and the run state'),
    compression: z.enum(['zstd', 'snappy', 'gzip', 'uncompressed']).default('zstd'),
    retentionDays: z
      .number()
      .int()
      .min(0)
      .default(0)
      .describe(
        'Keep fits/, shifts/ and runs/ partitions this many days behind the watermark; older windows are dropped and never recomputed (0 = keep everything)',
      ),
    lockWaitSeconds: z
      .number()
      .min(0)
      .default(30)
      .describe('How long a run waits for another run on the same output root before exiting 75'),
  })
  .strict()

const engineSchema = z
  .object({
    threads: z.number().int().min(1).max(256).default(2),
    memoryLimit: z.string().default('1GB').describe('DuckDB memory_limit'),
  })
  .strict()

const webhookSchema = z
  .object({
    name: z.string().min(1),
    url: z.string().url('must be an http(s) URL'),
    format: z.enum(['text', 'cloudevents']).default('text'),
    secret: z
      .string()
      .optional()
      .describe('HMAC key; write it as an environment reference (dollar-brace NAME brace) so it stays out of the file'),
    timeoutMs: z.number().int().positive().default(10_000),
    maxAttempts: z.number().int().min(1).max(20).default(5),
    minBackoffMs: z.number().int().min(0).default(500),
    maxBackoffMs: z.number().int().min(0).default(30_000),
    topN: z.number().int().min(1).default(20),
    sendAllClear: z.boolean().default(false),
  })
  .strict()

const notifySchema = z
  .object({
    webhooks: z.array(webhookSchema).default([]),
    reportBaseUrl: z.string().url().optional(),
    maxAgeHours: z.number().positive().default(72).describe('Undelivered digests older than this go to dead letters'),
    cooldownWindows: z.number().int().min(0).default(0),
  })
  .strict()

export const configSchema = z
  .object({
    job: z.string().min(1).default('slopeshift').describe('Job name: used in logs, digests and the runs table'),
    source: sourceSchema,
    window: windowSchema,
    detect: detectSchema.default(detectSchema.parse({})),
    projection: projectionSchema.default(projectionSchema.parse({})),
    output: outputSchema,
    engine: engineSchema.default(engineSchema.parse({})),
    notify: notifySchema.default(notifySchema.parse({})),
  })
  .strict()

/** A validated config with every default filled in. */
export type Config = z.infer<typeof configSchema>
/** The config as written in a file (defaults optional). */
export type ConfigInput = z.input<typeof configSchema>
export type DetectConfig = Config['detect']
export type SourceConfig = Config['source']
export type WebhookConfig = Config['notify']['webhooks'][number]
