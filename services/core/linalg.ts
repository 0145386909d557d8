/**
 * Dense linear solves for the small systems core needs (at most a few dozen unknowns), on
 * row-major Float64Arrays. Gaussian elimination with partial pivoting; no allocation beyond
 * what the caller passes.
 */

/**
 * Solves A·X = B in place for X, A n×n and B n×k, both row-major. A is destroyed; B holds X
 * on return. Returns false when A is singular to working precision (B is then undefined).
 */
export function solveInPlace(a: Float64Array, b: Float64Array, n: number, k: number): boolean {
  let scale = 0;
  for (let i = 0; i < n * n; i++) scale = Math.max(scale, Math.abs(a[i]));
  const tiny = (scale || 1) * 1e-13;
  for (let col = 0; col < n; col++) {
    let piv = col;
    let best = Math.abs(a[col * n + col]);
    for (let r = col + 1; r < n; r++) {
      const v = Math.abs(a[r * n + col]);
      if (v > best) {
        best = v;
        piv = r;
      }
    }
    if (best <= tiny) return false;
    if (piv !== col) {
      for (let c = 0; c < n; c++) {
        const t = a[col * n + c];
        a[col * n + c] = a[piv * n + c];
        a[piv * n + c] = t;
      }
      for (let c = 0; c < k; c++) {
        const t = b[col * k + c];
        b[col * k + c] = b[piv * k + c];
        b[piv * k + c] = t;
      }
    }
    const d = a[col * n + col];
    for (let r = col + 1; r < n; r++) {
      const f = a[r * n + col] / d;
      if (f === 0) continue;
      for (let c = col; c < n; c++) a[r * n + c] -= f * a[col * n + c];
      for (let c = 0; c < k; c++) b[r * k + c] -= f * b[col * k + c];
    }
  }
  for (let col = n - 1; col >= 0; col--) {
    const d = a[col * n + col];
    for (let c = 0; c < k; c++) {
      let s = b[col * k + c];
      for (let j = col + 1; j < n; j++) s -= a[col * n + j] * b[j * k + c];
      b[col * k + c] = s / d;
    }
  }
  return true;
}
