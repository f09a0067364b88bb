/**
 * The standard normal distribution function, shared by the sampler (Pólya–Gamma proposal
 * weights) and the summaries (exact posterior mixtures): W. J. Cody's rational Chebyshev
 * approximations (Cody 1969, Math. Comp. 23, 631–637; Cody 1993, ACM TOMS 19(1), Algorithm 715).
 */

export const INV_SQRT_2PI = 0.398942280401432677939946059934;

/**
 * Φ(−y) / exp(−y²/2) for y ≥ 0.67448975: W. J. Cody's rational Chebyshev approximations
 * (Cody 1969, Math. Comp. 23, 631–637, as packaged in Cody 1993, ACM TOMS 19(1), Algorithm 715;
 * coefficients recalled, verified in tests/exact.test.ts against an independent
 * series/continued-fraction evaluation). Scaling by exp(−y²/2) lets callers
 * combine the exponent with others and never overflow.
 */
export function normalUpperTailScaled(y: number): number {
  if (y <= 5.656854249492380195206754896838) {
    let num = 1.0765576773720192317e-8 * y;
    let den = y;
    num = (num + 0.39894151208813466764) * y;
    den = (den + 22.266688044328115691) * y;
    num = (num + 8.8831497943883759412) * y;
    den = (den + 235.38790178262499861) * y;
    num = (num + 93.506656132177855979) * y;
    den = (den + 1519.377599407554805) * y;
    num = (num + 597.27027639480026226) * y;
    den = (den + 6485.558298266760755) * y;
    num = (num + 2494.5375852903726711) * y;
    den = (den + 18615.571640885098091) * y;
    num = (num + 6848.1904505362823326) * y;
    den = (den + 34900.952721145977266) * y;
    num = (num + 11602.651437647350124) * y;
    den = (den + 38912.003286093271411) * y;
    return (num + 9842.7148383839780218) / (den + 19685.429676859990727);
  }
  const xsq = 1 / (y * y);
  let num = 0.02307344176494017303 * xsq;
  let den = xsq;
  num = (num + 0.21589853405795699) * xsq;
  den = (den + 1.28426009614491121) * xsq;
  num = (num + 0.1274011611602473639) * xsq;
  den = (den + 0.468238212480865118) * xsq;
  num = (num + 0.022235277870649807) * xsq;
  den = (den + 0.0659881378689285515) * xsq;
  num = (num + 0.001421619193227893466) * xsq;
  den = (den + 0.00378239633202758244) * xsq;
  return (INV_SQRT_2PI - (xsq * (num + 2.9112874951168792e-5)) / (den + 7.29751555083966205e-5)) / y;
}

/** Φ(x) for |x| ≤ 0.67448975 (Cody's central rational approximation). */
function normalCentral(x: number): number {
  const xsq = x * x;
  let num = 0.065682337918207449113 * xsq;
  let den = xsq;
  num = (num + 2.2352520354606839287) * xsq;
  den = (den + 47.20258190468824187) * xsq;
  num = (num + 161.02823106855587881) * xsq;
  den = (den + 976.09855173777669322) * xsq;
  num = (num + 1067.6894854603709582) * xsq;
  den = (den + 10260.932208618978205) * xsq;
  return 0.5 + (x * (num + 18154.981253343561249)) / (den + 45507.789335026729956);
}

/** Φ(x) given e = exp(−x²/2): the tails are e · R(|x|) for rational R. */
export function normalCdfGivenExp(x: number, e: number): number {
  const y = Math.abs(x);
  if (y <= 0.67448975) return normalCentral(x);
  if (y >= 38.5) return x > 0 ? 1 : 0;
  const upper = e * normalUpperTailScaled(y);
  return x > 0 ? 1 - upper : upper;
}

/**
 * Standard normal distribution function Φ(x), accurate to about 1e-15 relative in both tails.
 * exp(−x²/2) is formed as exp(−u²/2)·exp(−(x−u)(x+u)/2) with u = x rounded to 1/16, so that the
 * large part is exact.
 */
export function normalCdf(x: number): number {
  const y = Math.abs(x);
  const u = Math.trunc(y * 16) / 16;
  return normalCdfGivenExp(x, Math.exp(-u * u * 0.5) * Math.exp(-(y - u) * (y + u) * 0.5));
}
