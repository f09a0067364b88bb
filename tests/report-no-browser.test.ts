/**
 * Without any Chromium/Chrome the report still writes report.html and returns a warning that
 * names what to install (the CLI turns it into exit code `report`).
 */
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it, vi } from 'vitest';

vi.mock('../src/report/browser.js', async (importOriginal) => {
  const original = await importOriginal<typeof import('../src/report/browser.js')>();
  return { ...original, findBrowser: () => undefined };
});

const { renderReport } = await import('../src/report/index.js');
const fixture = join(import.meta.dirname, 'fixtures', 'run-area');
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-no-browser-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

describe('renderReport with no browser on the machine', () => {
  it('writes the HTML, no PDF, and says what to install', async () => {
    const result = await renderReport(fixture, { outDir: work });
    expect(existsSync(result.html)).toBe(true);
    expect(result.pdf).toBeUndefined();
    expect(existsSync(join(work, 'report.pdf'))).toBe(false);
    expect(result.warning).toContain('report.pdf was not written (report.html was)');
    expect(result.warning).toContain('apt-get install chromium');
  });
});
