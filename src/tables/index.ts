export * from './columns.js'
export { withConnection } from './duckdb.js'
export * from './json-schema.js'
export { publishStaged, removeStaleTemps } from './publish.js'
export { describeParquet, listTableFiles, type ReadTableOptions, readTable } from './read.js'
export {
  type Compression,
  type ReplaceResult,
  replacePartitions,
  replaceWindows,
  type WriteTableOptions,
  type WrittenPartition,
  writeTable,
} from './write.js'
