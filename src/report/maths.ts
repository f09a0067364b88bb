/**
 * The appendix mathematics: model equations and priors as TeX, typeset on the server with
 * KaTeX, and KaTeX's stylesheet with its fonts embedded as data: URLs so the page loads nothing.
 */
import { readFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { dirname, join } from 'node:path';
import katex from 'katex';

/** TeX → HTML (no MathML, no scripts). Our own TeX: a mistake here is a bug, so it throws. */
export function tex(source: string, display = false): string {
  return katex.renderToString(source, { displayMode: display, output: 'html', throwOnError: true, strict: 'error' });
}

/** A prior from summary.json, normalised: `flat`, `{ kind: 'normal', … }` or `{ normal: {…} }`. */
export interface PriorSpec {
  kind: string;
  params: Record<string, number>;
}

export function normalisePrior(value: unknown): PriorSpec | null {
  if (typeof value === 'string') return { kind: value, params: {} };
  if (typeof value !== 'object' || value === null) return null;
  const record = value as Record<string, unknown>;
  const numbers = (obj: Record<string, unknown>): Record<string, number> =>
    Object.fromEntries(Object.entries(obj).filter((e): e is [string, number] => typeof e[1] === 'number'));
  if (typeof record.kind === 'string') return { kind: record.kind, params: numbers(record) };
  const keys = Object.keys(record);
  if (keys.length === 1) {
    const inner = record[keys[0]];
    return { kind: keys[0], params: typeof inner === 'object' && inner !== null ? numbers(inner as Record<string, unknown>) : {} };
  }
  return null;
}

/** A number for TeX and text: up to 6 significant digits, no exponent noise. */
const texNumber = (v: number | undefined): string => (v === undefined ? '?' : String(Number(v.toPrecision(6))));

/** The parameter a prior key stands for, in words and in TeX. */
export const PRIOR_TARGETS: Record<string, { name: string; symbol: string }> = {
  coefficients: { name: 'Coefficients', symbol: '\\boldsymbol{\\beta}' },
  site_sd: { name: 'Between-site standard deviation', symbol: '\\sigma_u' },
  unit_sd: { name: 'Within-site standard deviation', symbol: '\\sigma_e' },
};

/** One row of the priors table: the distribution typeset, its values in words. */
export function describePrior(key: string, spec: PriorSpec | null): { tex: string; values: string } {
  const sigma = key === 'unit_sd' ? '\\sigma_e' : '\\sigma_u';
  if (!spec) return { tex: '\\text{not recorded}', values: 'not recorded in the run' };
  const p = spec.params;
  switch (key === 'coefficients' ? `coef:${spec.kind}` : spec.kind) {
    case 'coef:flat':
      return { tex: 'p(\\boldsymbol{\\beta}) \\propto 1', values: 'flat (improper uniform) on every coefficient' };
    case 'coef:normal':
      return {
        tex: `\\beta_k \\sim \\mathcal{N}\\!\\left(${texNumber(p.mean)},\\ ${texNumber(p.sd)}^2\\right)`,
        values: `normal, mean ${texNumber(p.mean)}, sd ${texNumber(p.sd)}, independent across coefficients`,
      };
    case 'uniform':
      return { tex: `p(${sigma}) \\propto 1,\\ ${sigma} > 0`, values: 'uniform on the standard deviation over (0, ∞)' };
    case 'half_cauchy':
      return {
        tex: `${sigma} \\sim \\text{half-Cauchy}(0,\\ A),\\ A = ${texNumber(p.scale)}`,
        values: `half-Cauchy on the standard deviation, scale A = ${texNumber(p.scale)} (density used directly by the collapsed sampler; the plain sampler uses the inverse-gamma mixture of Huang & Wand 2013)`,
      };
    case 'inverse_gamma':
      return {
        tex: `${sigma}^2 \\sim \\text{Inv-Gamma}(a,\\ b),\\ a = ${texNumber(p.shape)},\\ b = ${texNumber(p.scale)}`,
        values: `inverse-gamma on the variance, shape ${texNumber(p.shape)}, scale ${texNumber(p.scale)}`,
      };
    default:
      return { tex: `\\text{${spec.kind.replace(/[^A-Za-z0-9 _-]/g, '').replace(/_/g, '\\_')}}`, values: `${spec.kind} ${JSON.stringify(p)}` };
  }
}

/** An equation with its lead-in sentence; `$…$` in the lead is inline TeX. */
export interface Equation {
  lead: string;
  tex: string;
}

/** A lead-in sentence as HTML: text escaped, `$…$` spans typeset inline. */
export function leadHtml(lead: string): string {
  return lead
    .split('$')
    .map((part, i) => (i % 2 === 1 ? tex(part) : escapeHtml(part)))
    .join('');
}

function escapeHtml(text: string): string {
  return text.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;').replace(/'/g, '&#39;');
}

/** The model's equations, in the order the appendix states them. */
export function modelEquations(kind: string, finitePopulation = false): Equation[] {
  const weightArea = 'w_i = \\frac{\\sigma_u^2}{\\sigma_u^2 + \\psi_i}';
  switch (kind) {
    case 'area':
      return [
        { lead: 'Survey mean $y_i$ of site $i$ (sites with a sample), with known sampling variance $\\psi_i$:', tex: 'y_i = \\theta_i + e_i,\\qquad e_i \\sim \\mathcal{N}(0,\\ \\psi_i)' },
        { lead: 'True site value $\\theta_i$: a regression on the covariates plus a site effect (Fay & Herriot 1979):', tex: '\\theta_i = \\mathbf{x}_i^{\\top}\\boldsymbol{\\beta} + u_i,\\qquad u_i \\sim \\mathcal{N}(0,\\ \\sigma_u^2)' },
        {
          lead: 'Given $\\boldsymbol{\\beta}$ and $\\sigma_u$, the estimate is a weighted mean of the site\'s own survey mean and the regression prediction; $w_i$ is the weight on own data:',
          tex: `\\mathrm{E}(\\theta_i \\mid y_i, \\boldsymbol{\\beta}, \\sigma_u) = w_i\\, y_i + (1 - w_i)\\, \\mathbf{x}_i^{\\top}\\boldsymbol{\\beta},\\qquad ${weightArea}`,
        },
        { lead: 'A site without a sample gets the synthetic estimate (weight 0 on own data):', tex: '\\theta_i = \\mathbf{x}_i^{\\top}\\boldsymbol{\\beta} + u_i,\\qquad u_i \\sim \\mathcal{N}(0,\\ \\sigma_u^2)' },
      ];
    case 'unit':
      return [
        { lead: 'Unit $j$ in site $i$ (nested-error regression, Battese, Harter & Fuller 1988):', tex: 'y_{ij} = \\mathbf{x}_{ij}^{\\top}\\boldsymbol{\\beta} + u_i + e_{ij},\\qquad u_i \\sim \\mathcal{N}(0,\\ \\sigma_u^2),\\quad e_{ij} \\sim \\mathcal{N}(0,\\ \\sigma_e^2)' },
        { lead: 'Target: the site mean at the known population covariate means $\\bar{\\mathbf{X}}_i$ of site $i$:', tex: '\\mu_i = \\bar{\\mathbf{X}}_i^{\\top}\\boldsymbol{\\beta} + u_i' },
        { lead: 'Weight on own data for a site with $n_i$ sampled units:', tex: 'w_i = \\frac{\\sigma_u^2}{\\sigma_u^2 + \\sigma_e^2 / n_i}' },
        ...(finitePopulation
          ? [
              {
                lead: 'Published target here: the finite-population mean of the site\'s $N_i$ units — the $n_i$ sampled values as observed, model predictions for the rest ($\\bar{\\mathbf{X}}_{i,r}$ the mean covariates of the unsampled units):',
                tex: '\\bar{Y}_i = \\frac{n_i}{N_i}\\,\\bar{y}_i + \\frac{N_i - n_i}{N_i}\\left(\\bar{\\mathbf{X}}_{i,r}^{\\top}\\boldsymbol{\\beta} + u_i + \\bar{e}_{i,r}\\right)',
              },
            ]
          : []),
      ];
    case 'counts':
      return [
        { lead: 'Cases $y_i$ out of $n_i$ trials in site $i$:', tex: 'y_i \\sim \\operatorname{Binomial}(n_i,\\ p_i),\\qquad \\operatorname{logit} p_i = \\mathbf{x}_i^{\\top}\\boldsymbol{\\beta} + u_i,\\qquad u_i \\sim \\mathcal{N}(0,\\ \\sigma_u^2)' },
        { lead: 'Sampled through Pólya–Gamma augmentation (Polson, Scott & Windle 2013):', tex: '\\omega_i \\mid \\cdot \\sim \\operatorname{PG}\\!\\left(n_i,\\ \\mathbf{x}_i^{\\top}\\boldsymbol{\\beta} + u_i\\right)' },
        {
          lead: 'Weight on own data: the posterior mean over the draws of the shrinkage weight of the logit, with the binomial information $\\tilde{n}_i p_i (1 - p_i)$ ($\\tilde{n}_i$ the effective number of trials):',
          tex: 'w_i = \\frac{\\tilde{n}_i\\, p_i (1 - p_i)\\, \\sigma_u^2}{1 + \\tilde{n}_i\\, p_i (1 - p_i)\\, \\sigma_u^2}',
        },
      ];
    default:
      return [];
  }
}

/**
 * How the published figures are derived from the draws. The CV follows the model's rule: sd over
 * |estimate|, or for the shares of the counts model sd over min(p, 1 − p) (this project's rule,
 * see shareCv in src/models/counts-prepare.ts).
 */
export function summaryEquations(intervalLevel: number, kind = 'area'): Equation[] {
  const alpha = Number((1 - intervalLevel).toPrecision(6));
  const interval = `Interval: equal-tailed, the ${alpha / 2} and ${Number((1 - alpha / 2).toPrecision(6))} quantiles of the draws; reliability: the coefficient of variation`;
  return [
    { lead: 'Model estimate and its sd: mean and standard deviation of the $S$ posterior draws:', tex: '\\hat{\\theta}_i = \\frac{1}{S}\\sum_{s=1}^{S} \\theta_i^{(s)},\\qquad \\mathrm{sd}_i = \\Big(\\tfrac{1}{S-1}\\sum_{s=1}^{S} (\\theta_i^{(s)} - \\hat{\\theta}_i)^2\\Big)^{1/2}' },
    kind === 'counts'
      ? {
          lead: `${interval} of a share $\\hat{p}_i$, taken relative to the share or to its complement, whichever is smaller, so that shares near 0 and near 1 are judged alike (this project's rule; the same rule for the survey share):`,
          tex: '\\mathrm{CV}_i = \\mathrm{sd}_i \\,/\\, \\min(\\hat{p}_i,\\ 1 - \\hat{p}_i)',
        }
      : { lead: interval, tex: '\\mathrm{CV}_i = \\mathrm{sd}_i \\,/\\, |\\hat{\\theta}_i|' },
  ];
}

// ---------------------------------------------------------------------------------------------
// KaTeX stylesheet with embedded fonts.

const katexDist = (): string => dirname(createRequire(import.meta.url).resolve('katex'));

/**
 * katex.css with each @font-face reduced to its woff2 file embedded as a data: URL, keeping only
 * the font families that `renderedHtml` can use (decided from the class names KaTeX emitted).
 */
export function katexCss(renderedHtml: string): string {
  const dist = katexDist();
  const css = readFileSync(join(dist, 'katex.css'), 'utf8').replace(/\/\*[\s\S]*?\*\//g, ''); // comments hold URLs
  const used = new Set<string>();
  const classes = new Set<string>();
  for (const match of renderedHtml.matchAll(/class="([^"]*)"/g)) for (const c of match[1].split(/\s+/)) if (c) classes.add(c);
  // Rules that set a KaTeX font family: keep the family if all classes of a selector occur.
  for (const rule of css.replace(/@font-face\s*\{[^}]*\}/g, '').matchAll(/([^{}]+)\{([^{}]*)\}/g)) {
    const family = /font(?:-family)?:[^;]*?(KaTeX_[A-Za-z0-9]+)/.exec(rule[2]);
    if (!family) continue;
    const selectors = rule[1].split(',');
    if (selectors.some((sel) => [...sel.matchAll(/\.([A-Za-z0-9_-]+)/g)].every((m) => classes.has(m[1])))) used.add(family[1]);
  }
  return css.replace(/@font-face\s*\{([^}]*)\}/g, (whole, inside: string) => {
    const family = /font-family:\s*"?(KaTeX_[A-Za-z0-9]+)"?/.exec(inside)?.[1];
    const file = /url\((fonts\/[^)]+\.woff2)\)/.exec(inside)?.[1];
    if (!family || !file || !used.has(family)) return '';
    const data = readFileSync(join(dist, file)).toString('base64');
    const rest = inside.replace(/src:[^;]*;/, `src: url(data:font/woff2;base64,${data}) format("woff2");`);
    return `@font-face {${rest}}`;
  }).replace(/\n{3,}/g, '\n');
}
