/**
 * Regenerates schemas/digest.schema.json from src/notify/digest-schema.ts. Run after changing the
 * digest: `npx tsx test/helpers/write-digest-schema.ts`; test/unit/notify/digest-schema.test.ts fails
 * until the committed file matches the code.
 */
import { writeFileSync } from 'node:fs'
import { digestJsonSchema } from '../../src/notify/digest-schema.js'

const url = new URL('../../schemas/digest.schema.json', import.meta.url)
writeFileSync(url, `${JSON.stringify(digestJsonSchema(), null, 2)}\n`)
process.stdout.write(`wrote ${url.pathname}\n`)
