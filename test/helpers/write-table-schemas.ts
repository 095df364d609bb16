/**
 * Regenerates schemas/fits.schema.json, shifts.schema.json and runs.schema.json from src/tables/columns.ts.
 * Run after changing a column: `npx tsx test/helpers/write-table-schemas.ts`; test/unit/tables/json-schema.test.ts
 * fails until the committed files match the code.
 */
import { writeFileSync } from 'node:fs'
import { renderTableSchema, tableNames, tableSchemaFileName } from '../../src/tables/index.js'

for (const table of tableNames) {
  const url = new URL(`../../schemas/${tableSchemaFileName(table)}`, import.meta.url)
  writeFileSync(url, renderTableSchema(table))
  process.stdout.write(`wrote ${url.pathname}\n`)
}
