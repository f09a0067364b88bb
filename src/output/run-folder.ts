/**
 * Writes a run folder atomically: every file goes into `<out>.tmp-<pid>`, which is renamed to
 * `<out>` only when complete. An existing run folder at `<out>` is replaced; any other existing
 * non-empty folder is left alone and reported.
 */
import { existsSync } from 'node:fs';
import { mkdir, open, readdir, rename, rm, writeFile } from 'node:fs/promises';
import { basename, dirname, join, resolve } from 'node:path';
import { UserError } from '../errors.js';

/** A file's content: text, bytes, or bytes produced in chunks (large files, written as they come). */
export type FileContent = string | Uint8Array | Iterable<Uint8Array>;

export type RunFiles = ReadonlyMap<string, FileContent>;

async function writeContent(path: string, content: FileContent): Promise<void> {
  if (typeof content === 'string' || content instanceof Uint8Array) {
    await writeFile(path, content);
    return;
  }
  const handle = await open(path, 'w');
  try {
    for (const chunk of content) await handle.write(chunk);
  } finally {
    await handle.close();
  }
}

/** Files that mark a folder as one of ours, safe to replace. */
const RUN_MARKER = 'manifest.json';

async function isReplaceable(dir: string): Promise<boolean> {
  if (!existsSync(dir)) return true;
  const entries = await readdir(dir).catch(() => null);
  if (entries === null) return false;
  return entries.length === 0 || entries.includes(RUN_MARKER);
}

function outputError(action: string, path: string, error: unknown): UserError {
  const code = (error as NodeJS.ErrnoException)?.code;
  const why = code === 'EACCES' || code === 'EPERM' ? 'permission denied' : code === 'ENOSPC' ? 'disk full' : String((error as Error)?.message ?? error);
  return new UserError('output', `cannot ${action} ${path}: ${why}`);
}

export async function writeRunFolder(outDir: string, files: RunFiles): Promise<string> {
  const target = resolve(outDir);
  if (!(await isReplaceable(target)))
    throw new UserError('output', `${target} exists and is not a shrinkwell run folder; choose another --out`);
  const temp = join(dirname(target), `.${basename(target)}.tmp-${process.pid}`);
  try {
    await rm(temp, { recursive: true, force: true });
    await mkdir(temp, { recursive: true });
    for (const [name, content] of files) {
      await mkdir(dirname(join(temp, name)), { recursive: true });
      await writeContent(join(temp, name), content);
    }
  } catch (error) {
    await rm(temp, { recursive: true, force: true });
    throw outputError('write', temp, error);
  }
  const old = `${temp}.old`;
  try {
    if (existsSync(target)) await rename(target, old);
    await rename(temp, target);
  } catch (error) {
    await rm(temp, { recursive: true, force: true });
    if (existsSync(old) && !existsSync(target)) await rename(old, target);
    throw outputError('create', target, error);
  }
  await rm(old, { recursive: true, force: true });
  return target;
}

/** Writes one file atomically (temporary name, then rename). */
export async function writeFileAtomic(path: string, content: string | Uint8Array): Promise<void> {
  const temp = join(dirname(path), `.${basename(path)}.tmp-${process.pid}`);
  try {
    await writeFile(temp, content);
    await rename(temp, path);
  } catch (error) {
    await rm(temp, { force: true });
    throw outputError('write', path, error);
  }
}
