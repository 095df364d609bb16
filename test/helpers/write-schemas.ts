/**
 * Regenerates every committed JSON Schema in schemas/ from its source in src/ (`npm run schemas`):
 * the config (zod), the three tables (column specs) and the digest (zod). Tests fail when a
 * committed file drifts from the code.
 */
import { writeFileSync } from 'node:fs'
import { configJsonSchema } from '../../src/config/json-schema.js'
import { digestJsonSchema } from '../../src/notify/digest-schema.js'
import { renderTableSchema, tableNames, tableSchemaFileName } from '../../src/tables/index.js'

const write = (name: string, text: string): void => {
  const url = new URL(`../../schemas/${name}`, import.meta.url)
  writeFileSync(url, text)
  process.stdout.write(`wrote ${url.pathname}\n`)
}

write('config.schema.json', `${JSON.stringify(configJsonSchema(), null, 2)}\n`)
write('digest.schema.json', `${JSON.stringify(digestJsonSchema(), null, 2)}\n`)
for (const table of tableNames) write(tableSchemaFileName(table), renderTableSchema(table))
