/**
 * The sorting permutation of a vector of finite doubles: order[p] = index of the p-th smallest.
 *
 * Fast path: a 32-bit key k(v) = floor((v - min) · (2^32 - 1) / (max - min)), which never
 * decreases as v grows, sorted by a least-significant-digit radix sort (three passes of 11, 11 and
 * 10 bits, stable, O(S)); then one insertion-sort sweep on the values themselves repairs the order
 * inside groups of equal keys (the only places where it can be wrong, since k(a) < k(b) implies
 * a < b). For draws of a continuous distribution such groups are rare, so the sweep costs O(S).
 * When the values pile up in few keys (extreme outliers stretch the range), the sweep's work is
 * capped and the permutation is recomputed by a comparison sort — exact either way.
 */
export class SortOrder {
  /** order[p] = index of the p-th smallest value (ties in index order on the fast path). */
  readonly order: Int32Array;
  /** sorted[p] = values[order[p]]. */
  readonly sorted: Float64Array;
  private readonly keys: Uint32Array;
  private readonly keysSwap: Uint32Array;
  private readonly orderSwap: Int32Array;
  private readonly counts = new Int32Array(3 * 2048);

  constructor(readonly capacity: number) {
    this.order = new Int32Array(capacity);
    this.sorted = new Float64Array(capacity);
    this.keys = new Uint32Array(capacity);
    this.keysSwap = new Uint32Array(capacity);
    this.orderSwap = new Int32Array(capacity);
  }

  /** Fill `order` and `sorted` for values[0..len), all finite. */
  compute(values: Float64Array, len: number): void {
    if (len > this.capacity) throw new RangeError('more values than the sort workspace holds');
    let min = Number.POSITIVE_INFINITY;
    let max = Number.NEGATIVE_INFINITY;
    for (let i = 0; i < len; i++) {
      const v = values[i];
      if (v < min) min = v;
      if (v > max) max = v;
    }
    const scale = 4294967295 / (max - min);
    if (!(scale < Number.POSITIVE_INFINITY) || !this.radixThenRepair(values, len, min, scale)) {
      this.comparisonSort(values, len);
    }
    const order = this.order;
    const sorted = this.sorted;
    for (let p = 0; p < len; p++) sorted[p] = values[order[p]];
  }

  /** Returns false when the repair sweep would cost too much (caller falls back). */
  private radixThenRepair(values: Float64Array, len: number, min: number, scale: number): boolean {
    const counts = this.counts;
    counts.fill(0);
    let keys = this.keys;
    let order = this.order;
    for (let i = 0; i < len; i++) {
      let k = Math.floor((values[i] - min) * scale);
      if (k > 4294967295) k = 4294967295;
      keys[i] = k;
      order[i] = i;
      counts[k & 2047]++;
      counts[2048 + ((k >>> 11) & 2047)]++;
      counts[4096 + (k >>> 22)]++;
    }
    for (let d = 0; d < 3; d++) {
      let sum = 0;
      const base = d * 2048;
      for (let b = 0; b < 2048; b++) {
        const c = counts[base + b];
        counts[base + b] = sum;
        sum += c;
      }
    }
    let keysOut = this.keysSwap;
    let orderOut = this.orderSwap;
    for (let d = 0; d < 3; d++) {
      const shift = 11 * d;
      const base = d * 2048;
      for (let i = 0; i < len; i++) {
        const k = keys[i];
        const pos = counts[base + ((k >>> shift) & 2047)]++;
        keysOut[pos] = k;
        orderOut[pos] = order[i];
      }
      const tk = keys;
      keys = keysOut;
      keysOut = tk;
      const to = order;
      order = orderOut;
      orderOut = to;
    }
    // Three passes: the result sits in the swap buffers; move it home.
    this.order.set(order.subarray(0, len));

    // Repair equal-key groups by insertion sort on the values, with a work cap.
    const out = this.order;
    let work = 0;
    const workCap = 16 * len + 1024;
    for (let p = 1; p < len; p++) {
      const idx = out[p];
      const v = values[idx];
      let q = p - 1;
      if (values[out[q]] <= v) continue;
      while (q >= 0 && values[out[q]] > v) {
        out[q + 1] = out[q];
        q--;
      }
      out[q + 1] = idx;
      work += p - 1 - q;
      if (work > workCap) return false;
    }
    return true;
  }

  private comparisonSort(values: Float64Array, len: number): void {
    const order = this.order;
    for (let i = 0; i < len; i++) order[i] = i;
    order.subarray(0, len).sort((a, b) => values[a] - values[b]);
  }
}
