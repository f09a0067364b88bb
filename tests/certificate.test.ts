/** The sampler certificate: Gibbs vs exact means in MCSE units, with a family-wise bound. */
import { describe, expect, it } from 'vitest';
import { samplerCertificate } from '../src/summaries/certificate.js';
import { exactAreaPosterior } from '../src/summaries/exact.js';
import { areaData, fitInMemory } from './support/area-fit.js';

describe('sampler certificate', () => {
  it('a single quantity uses the two-sided 1% normal quantile 2.5758 (standard normal table)', () => {
    const q = { name: 'a', mean: 1, sd: 1, lower: 0, upper: 2, median: 1, rhat: 1, essBulk: 1000, essTail: 1000, mcseMean: 0.1 };
    const c = samplerCertificate(new Map([['a', q]]), new Map([['a', 1.2]]));
    expect(c.bound).toBeCloseTo(2.5758, 3);
    expect(c.rows[0].z).toBeCloseTo(-2, 12);
    expect(c.allWithin).toBe(true);
  });

  it('passes a correct fit and catches a mean moved by 10 MCSE', async () => {
    const rows = [1.2, 2.9, 2.2, 3.8, 3.1, 4.4, 2.5].map((y, i) => ({ id: `s${i}`, x: [i - 3], y, psi: 0.5 + 0.1 * i }));
    const data = areaData([...rows, { id: 'u', x: [4] }], ['x']);
    const siteSd = { kind: 'half_cauchy' as const, scale: 1 };
    const fit = await fitInMemory(data, { siteSd, draws: 3000, seed: 17 });
    const exact = exactAreaPosterior(data, { coefficients: { kind: 'flat' }, site_sd: siteSd });
    const means = new Map<string, number>([['site_sd', exact.siteSd.mean]]);
    data.siteIds.forEach((id, i) => means.set(`site:${id}`, exact.sites[i].mean));
    expect(samplerCertificate(fit, means).allWithin).toBe(true);
    const moved = new Map(fit);
    const s3 = fit.get('site:s3')!;
    moved.set('site:s3', { ...s3, mean: s3.mean + 10 * s3.mcseMean });
    const c = samplerCertificate(moved, means);
    expect(c.allWithin).toBe(false);
    expect(c.worst.quantity).toBe('site:s3');
  });
});
