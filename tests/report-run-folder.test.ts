/**
 * The run-folder reader: a broken or missing folder gives a one-line UserError('runFolder')
 * naming the file (and line/column for CSV cells); a whole folder reads back exactly.
 */
import { cpSync, mkdtempSync, readFileSync, rmSync, unlinkSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { UserError } from '../src/errors.js';
import { drawsOf, readRunFolder } from '../src/report/read-run.js';

const fixture = join(import.meta.dirname, 'fixtures', 'run-area');
const work = mkdtempSync(join(tmpdir(), 'shrinkwell-read-run-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

let copies = 0;
/** A fresh copy of the fixture, changed by `edit`. */
function brokenCopy(edit: (dir: string) => void): string {
  const dir = join(work, `copy-${copies++}`);
  cpSync(fixture, dir, { recursive: true });
  edit(dir);
  return dir;
}

function failure(dir: string): UserError {
  try {
    readRunFolder(dir);
  } catch (error) {
    expect(error).toBeInstanceOf(UserError);
    return error as UserError;
  }
  throw new Error('expected readRunFolder to fail');
}

describe('readRunFolder', () => {
  it('reads the fixture: 40 sites, the parameters, and draws laid out quantity-major', () => {
    const run = readRunFolder(fixture);
    expect(run.estimates).toHaveLength(40);
    expect(run.parameters.map((p) => p.quantity)).toEqual(['coef:intercept', 'coef:rain', 'coef:veg', 'site_sd']);
    expect(run.diagnostics).toHaveLength(44);
    expect(run.summary.counts.sites).toBe(40);
    const d12 = run.estimates.find((s) => s.site === 'D12');
    expect(d12?.label).toBe('<b>x</b> & "y"');
    const d01 = run.estimates[0];
    expect(d01.n).toBe(0);
    expect(d01.direct).toBeNull();
    expect(d01.reasons.length).toBeGreaterThan(0);
    // Index (q·C + c)·D + d, checked against the raw bytes.
    const bytes = readFileSync(join(fixture, 'draws.bin'));
    const { chains, drawsPerChain } = run.draws;
    const q = run.draws.quantities.indexOf('site_sd');
    const sd = drawsOf(run.draws, 'site_sd');
    expect(sd).toHaveLength(chains);
    expect(sd?.[2][7]).toBe(bytes.readFloatLE(4 * ((q * chains + 2) * drawsPerChain + 7)));
    expect(drawsOf(run.draws, 'no-such-quantity')).toBeNull();
  });

  it('names a missing folder', () => {
    const error = failure(join(work, 'does-not-exist'));
    expect(error.kind).toBe('runFolder');
    expect(error.message).toMatch(/does-not-exist: run folder not found$/);
  });

  it('names a missing file', () => {
    const dir = brokenCopy((d) => unlinkSync(join(d, 'estimates.csv')));
    expect(failure(dir).message).toBe(`${join(dir, 'estimates.csv')}: missing from the run folder`);
  });

  it('names the line and column of a bad number', () => {
    const dir = brokenCopy((d) => {
      const path = join(d, 'estimates.csv');
      const lines = readFileSync(path, 'utf8').split('\n');
      const cells = lines[3].split(',');
      cells[6] = 'abc'; // estimate of the third site
      lines[3] = cells.join(',');
      writeFileSync(path, lines.join('\n'));
    });
    expect(failure(dir).message).toBe(`${join(dir, 'estimates.csv')}: line 4, column estimate: "abc" is not a number`);
  });

  it('names a missing column and an unknown flag', () => {
    const noColumn = brokenCopy((d) => {
      const path = join(d, 'parameters.csv');
      writeFileSync(path, readFileSync(path, 'utf8').replace('quantity,estimate,sd,lower,upper', 'quantity,estimate,sd,lower,top'));
    });
    expect(failure(noColumn).message).toBe(`${join(noColumn, 'parameters.csv')}: line 1: column "upper" is missing`);
    const badFlag = brokenCopy((d) => {
      const path = join(d, 'estimates.csv');
      writeFileSync(path, readFileSync(path, 'utf8').replace(',publish,', ',publishable,'));
    });
    expect(failure(badFlag).message).toMatch(/estimates\.csv: line \d+, column flag: "publishable" is not one of publish, caution, suppress$/);
  });

  it('rejects another format version and a draws.bin of the wrong size', () => {
    const version = brokenCopy((d) => {
      const path = join(d, 'summary.json');
      const summary = JSON.parse(readFileSync(path, 'utf8'));
      summary.format_version = 2;
      writeFileSync(path, JSON.stringify(summary));
    });
    expect(failure(version).message).toBe(`${join(version, 'summary.json')}: format_version 2 is not supported (this version reads 1)`);
    const short = brokenCopy((d) => {
      const path = join(d, 'draws.bin');
      writeFileSync(path, readFileSync(path).subarray(0, 400));
    });
    expect(failure(short).message).toMatch(/draws\.bin: 400 bytes, but draws\.json describes \d+ \(44 quantities × 4 chains × 150 draws × 4\)$/);
  });

  it('rejects a summary that is not JSON, and a site count that disagrees with estimates.csv', () => {
    const notJson = brokenCopy((d) => writeFileSync(join(d, 'summary.json'), '{ "format": '));
    expect(failure(notJson).message).toMatch(/summary\.json: not valid JSON \(/);
    const counts = brokenCopy((d) => {
      const path = join(d, 'summary.json');
      const summary = JSON.parse(readFileSync(path, 'utf8'));
      summary.counts.sites = 41;
      writeFileSync(path, JSON.stringify(summary));
    });
    expect(failure(counts).message).toBe(`${join(counts, 'estimates.csv')}: 40 site rows but summary.json counts 41 sites`);
  });

  it('messages are one line', () => {
    const dir = brokenCopy((d) => writeFileSync(join(d, 'manifest.json'), '[1, 2]'));
    const message = failure(dir).message;
    expect(message).toBe(`${join(dir, 'manifest.json')}: expected a JSON object`);
    expect(message).not.toContain('\n');
  });
});
