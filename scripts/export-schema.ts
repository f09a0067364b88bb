/**
 * Writes the JSON Schema of the config file to `schema/shrinkwell.config.schema.json`.
 * Run with `npm run schema` after changing `src/config/schema.ts`; a test fails when the
 * committed file and the schema drift apart.
 */
import { existsSync } from 'node:fs';
import { mkdir, writeFile } from 'node:fs/promises';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { jsonSchemaText } from '../src/config/schema.js';

/** Relative location of the committed schema inside the project. */
export const SCHEMA_FILE = join('schema', 'shrinkwell.config.schema.json');

/** The project folder: the nearest folder above this script holding a package.json. */
function projectRoot(): string {
  let folder = dirname(fileURLToPath(import.meta.url));
  while (!existsSync(join(folder, 'package.json'))) {
    const parent = dirname(folder);
    if (parent === folder) throw new Error('export-schema: no package.json above the script');
    folder = parent;
  }
  return folder;
}

async function main(): Promise<void> {
  const target = process.argv[2] ?? join(projectRoot(), SCHEMA_FILE);
  await mkdir(dirname(target), { recursive: true });
  await writeFile(target, jsonSchemaText(), 'utf8');
  process.stdout.write(`wrote ${target}\n`);
}

await main();
