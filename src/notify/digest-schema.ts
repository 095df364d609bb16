/**
 * The digest contract: the `data` of a `cloudevents` delivery and the content a `text` delivery is
 * rendered from. Single source of the `Digest` type; `schemas/digest.schema.json` is generated
 * from it with {@link digestJsonSchema} and a test keeps the two in step (style.md 4.1).
 *
 * Additive changes (a new optional field) keep `schemaVersion` 1; anything else bumps it and the
 * CloudEvents `type` suffix (`dev.slopeshift.digest.v1`) together.
 */
import { z } from 'zod'

/** Version of the digest layout; matches the `.v1` suffix of the CloudEvents type. */
export const digestSchemaVersion = 1

const isoTime = z.iso.datetime().describe('UTC instant, ISO 8601 with Z')
const count = z.number().int().min(0)
const maybeNumber = z.number().nullable()

/** Verdict counts of every series tested in the run (design.md "verdict"). */
export const verdictCountsSchema = z
  .object({ shift: count, steady: count, thin: count, flat: count })
  .strict()
  .describe('How many (series, window) pairs got each verdict in this run')

/** How the slope changed, in one word (the plain-language line says it in a sentence). */
export const changeSchema = z
  .enum(['accelerated', 'slowed', 'reversed', 'started', 'stopped', 'unknown'])
  .describe(
    'accelerated/slowed: same direction, steeper/shallower; reversed: sign flipped; started: from (nearly) level; stopped: to (nearly) level',
  )

/** One shifted series in one window, as listed in the digest. */
export const digestShiftSchema = z
  .object({
    rank: z.number().int().min(1).describe('1 = most significant (lowest q-value, then largest |delta|)'),
    key: z.record(z.string(), z.string().nullable()).describe('Key column name → value of this series'),
    seriesId: z.string().describe('Canonical series id: JSON array of the key values in config order'),
    windowStart: isoTime,
    windowEnd: isoTime.describe('Exclusive end of the window'),
    baseline: z.string().describe('What the window was compared against, e.g. "previous window"'),
    slopeBefore: maybeNumber.describe('Baseline slope, y units per xUnit'),
    slopeAfter: maybeNumber.describe('Slope in this window, y units per xUnit'),
    delta: maybeNumber.describe('slopeAfter − slopeBefore, y units per xUnit'),
    ratio: maybeNumber.describe('slopeAfter / slopeBefore; null when undefined'),
    qValue: maybeNumber.describe('Benjamini–Hochberg adjusted p-value across the series of this window'),
    pValue: maybeNumber,
    direction: z.enum(['rising', 'falling', 'level']).describe('Sign of slopeAfter'),
    change: changeSchema,
    summary: z.string().describe('One plain-language line, e.g. "rising 3.4× faster than the previous window"'),
  })
  .strict()

/** A window tested in the run. */
export const digestWindowSchema = z.object({ start: isoTime, end: isoTime }).strict()

/** The digest: one per run per webhook. */
export const digestSchema = z
  .object({
    schemaVersion: z.literal(digestSchemaVersion),
    id: z
      .string()
      .regex(/^dg_[0-9a-f]{32}$/)
      .describe('Content-derived id (series, windows, verdicts; never the run id): the webhook-id of every delivery'),
    kind: z.enum(['shifts', 'all-clear']).describe('all-clear: nothing new to report, sent only when configured'),
    job: z.string(),
    runId: z.string(),
    xUnit: z.enum(['ms', 's', 'minute', 'hour', 'day', 'week']).describe('Slopes are per this unit'),
    yUnit: z.string().nullable().describe('Unit label of the metric, when configured'),
    keyColumns: z.array(z.string()),
    timeZone: z.string().describe('IANA time zone the text shows window bounds in (the window time zone)'),
    windows: z.array(digestWindowSchema).describe('Distinct windows tested in this run, oldest first'),
    counts: verdictCountsSchema,
    shiftTotal: count.describe('Shifts to report after cooldown; `shifts` lists the top N of them'),
    heldByCooldown: count.describe('Shifts not reported: already notified for their window, or folded by cooldown'),
    shifts: z.array(digestShiftSchema),
    reportUrl: z.url().nullable().describe('HTML report of the run; null until the report exists'),
    caution: z.string().describe('Advisory line: statistical evidence, not a safety system'),
  })
  .strict()

/** The digest data object (validated shape of `schemas/digest.schema.json`). */
export type Digest = z.infer<typeof digestSchema>
export type DigestShift = z.infer<typeof digestShiftSchema>
export type DigestChange = z.infer<typeof changeSchema>
export type VerdictCounts = z.infer<typeof verdictCountsSchema>

/**
 * JSON Schema (draft 2020-12) of the digest, as written to `schemas/digest.schema.json`.
 * Regenerate the file after changing the zod schema: `npm run schemas`.
 */
export function digestJsonSchema(): Record<string, unknown> {
  const generated = z.toJSONSchema(digestSchema, { target: 'draft-2020-12' })
  return {
    $schema: generated.$schema,
    title: 'slopeshift digest',
    description:
      'One message per run per webhook: verdict counts and the top shifted series. The data of a dev.slopeshift.digest.v1 CloudEvent.',
    ...generated,
  }
}
