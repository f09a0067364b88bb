/** The package version, read once from package.json (recorded in every manifest). */
import { readFileSync } from 'node:fs';

function packageVersion(): string {
  for (const rel of ['../package.json', '../../package.json']) {
    try {
      const pkg = JSON.parse(readFileSync(new URL(rel, import.meta.url), 'utf8')) as { name?: string; version?: string };
      if (pkg.name === 'shrinkwell' && pkg.version) return pkg.version;
    } catch {
      // try the next location: sources sit one level below the package, builds two
    }
  }
  return 'unknown';
}

export const VERSION = packageVersion();
