const KEY_MAX = 16777215; // 2^24 - 1

/**
 * The sorting permutation of a vector of finite doubles: order[p] = index of the p-th smallest.
 *
 * Fast path: a 24-bit key k(v) = floor((v - min) · (2^24 - 1) / (max - min)), which never
 * decreases as v grows, sorted by a least-significant-digit radix sort (two stable passes of 12
 * bits, O(S)); then one insertion-sort sweep on the values themselves repairs the order
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
  private readonly counts = new Int32Array(2 * 4096);

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
    if (max === min) {
      // All equal (or len <= 1): identity order.
      for (let i = 0; i < len; i++) {
        this.order[i] = i;
        this.sorted[i] = values[i];
      }
      return;
    }
    const scale = KEY_MAX / (max - min);
    if (!(scale < Number.POSITIVE_INFINITY) || !this.radixThenRepair(values, len, min, scale)) {
      this.comparisonSort(values, len);
    }
  }

  /** Returns false when the repair sweep would cost too much (caller falls back). */
  private radixThenRepair(values: Float64Array, len: number, min: number, scale: number): boolean {
    const counts = this.counts;
    counts.fill(0);
    const keys = this.keys;
    const order = this.order;
    for (let i = 0; i < len; i++) {
      let k = Math.floor((values[i] - min) * scale);
      if (k > KEY_MAX) k = KEY_MAX;
      keys[i] = k;
      counts[k & 4095]++;
      counts[4096 + (k >>> 12)]++;
    }
    for (let d = 0; d < 2; d++) {
      let sum = 0;
      const base = d * 4096;
      for (let b = 0; b < 4096; b++) {
        const c = counts[base + b];
        counts[base + b] = sum;
        sum += c;
      }
    }
    // Pass 1 (low 12 bits) into the swap buffers, pass 2 (high 12 bits) back into `order`.
    const keysMid = this.keysSwap;
    const orderMid = this.orderSwap;
    for (let i = 0; i < len; i++) {
      const k = keys[i];
      const pos = counts[k & 4095]++;
      keysMid[pos] = k;
      orderMid[pos] = i;
    }
    for (let i = 0; i < len; i++) {
      const pos = counts[4096 + (keysMid[i] >>> 12)]++;
      order[pos] = orderMid[i];
    }

    // Gather, then repair equal-key groups by insertion sort (values and indices move together),
    // with a work cap.
    const sorted = this.sorted;
    for (let p = 0; p < len; p++) sorted[p] = values[order[p]];
    let work = 0;
    const workCap = 16 * len + 1024;
    for (let p = 1; p < len; p++) {
      const v = sorted[p];
      if (sorted[p - 1] <= v) continue;
      const idx = order[p];
      let q = p - 1;
      while (q >= 0 && sorted[q] > v) {
        sorted[q + 1] = sorted[q];
        order[q + 1] = order[q];
        q--;
      }
      sorted[q + 1] = v;
      order[q + 1] = idx;
      work += p - 1 - q;
      if (work > workCap) return false;
    }
    return true;
  }

  private comparisonSort(values: Float64Array, len: number): void {
    const order = this.order;
    for (let i = 0; i < len; i++) order[i] = i;
    order.subarray(0, len).sort((a, b) => values[a] - values[b]);
    const sorted = this.sorted;
    for (let p = 0; p < len; p++) sorted[p] = values[order[p]];
  }
}
