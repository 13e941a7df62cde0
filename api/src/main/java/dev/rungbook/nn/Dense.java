package dev.rungbook.nn;

/** Small dense kernels for the network code. Package-private; a BLAS-backed version comes with learned rounding. */
final class Dense {
    private Dense() {
    }

    /**
     * {@code c[n x m] = a[n x k] * b[m x k]^T}, all row-major; {@code c} is overwritten. Each output is a dot product
     * of two contiguous rows, which the JIT vectorises.
     */
    static void matmulTransposedB(float[] a, float[] b, float[] c, int n, int k, int m) {
        for (int i = 0; i < n; i++) {
            int ai = i * k;
            for (int j = 0; j < m; j++) {
                int bj = j * k;
                float s0 = 0;
                float s1 = 0;
                float s2 = 0;
                float s3 = 0;
                int t = 0;
                for (; t + 3 < k; t += 4) {
                    s0 += a[ai + t] * b[bj + t];
                    s1 += a[ai + t + 1] * b[bj + t + 1];
                    s2 += a[ai + t + 2] * b[bj + t + 2];
                    s3 += a[ai + t + 3] * b[bj + t + 3];
                }
                for (; t < k; t++) {
                    s0 += a[ai + t] * b[bj + t];
                }
                c[i * m + j] = (s0 + s1) + (s2 + s3);
            }
        }
    }

    /**
     * {@code y[n x m] = x[n x k] * w[m x k]^T + b[m]}, row-major; {@code y} is overwritten. The weight is transposed
     * once to {@code [k x m]}; then two output rows at a time accumulate {@code x[i, t] * wT[t, :]} for four input
     * columns per pass with fused multiply-adds ({@link Math#fma}, one rounding each). Each pass is a loop over
     * contiguous rows without a reduction, which the JIT vectorises (unlike the dot-product form, whose float sum it
     * may not reorder), and each weight loaded serves two samples.
     */
    static void affine(float[] x, float[] w, float[] b, float[] y, int n, int k, int m) {
        float[] wt = new float[k * m];
        for (int o = 0; o < m; o++) {
            for (int t = 0; t < k; t++) {
                wt[t * m + o] = w[o * k + t];
            }
        }
        float[] acc0 = new float[m];
        float[] acc1 = new float[m];
        for (int i = 0; i < n; i += 2) {
            boolean pair = i + 1 < n;
            int x0 = i * k;
            int x1 = pair ? x0 + k : x0; // an odd last row is computed twice and stored once
            System.arraycopy(b, 0, acc0, 0, m);
            System.arraycopy(b, 0, acc1, 0, m);
            int t = 0;
            for (; t + 3 < k; t += 4) {
                float a0 = x[x0 + t];
                float a1 = x[x0 + t + 1];
                float a2 = x[x0 + t + 2];
                float a3 = x[x0 + t + 3];
                float c0 = x[x1 + t];
                float c1 = x[x1 + t + 1];
                float c2 = x[x1 + t + 2];
                float c3 = x[x1 + t + 3];
                int r0 = t * m;
                int r1 = r0 + m;
                int r2 = r1 + m;
                int r3 = r2 + m;
                for (int j = 0; j < m; j++) {
                    float w0 = wt[r0 + j];
                    float w1 = wt[r1 + j];
                    float w2 = wt[r2 + j];
                    float w3 = wt[r3 + j];
                    acc0[j] = Math.fma(a3, w3, Math.fma(a2, w2, Math.fma(a1, w1, Math.fma(a0, w0, acc0[j]))));
                    acc1[j] = Math.fma(c3, w3, Math.fma(c2, w2, Math.fma(c1, w1, Math.fma(c0, w0, acc1[j]))));
                }
            }
            for (; t < k; t++) {
                float a0 = x[x0 + t];
                float c0 = x[x1 + t];
                int r0 = t * m;
                for (int j = 0; j < m; j++) {
                    acc0[j] = Math.fma(a0, wt[r0 + j], acc0[j]);
                    acc1[j] = Math.fma(c0, wt[r0 + j], acc1[j]);
                }
            }
            System.arraycopy(acc0, 0, y, i * m, m);
            if (pair) {
                System.arraycopy(acc1, 0, y, (i + 1) * m, m);
            }
        }
    }

    /** {@code c[k x m] += a[n x k]^T * b[n x m]}, row-major (weight gradients). */
    static void addMatmulTransposedA(float[] a, float[] b, float[] c, int n, int k, int m) {
        for (int i = 0; i < n; i++) {
            int ai = i * k;
            int bi = i * m;
            for (int t = 0; t < k; t++) {
                float av = a[ai + t];
                if (av == 0f) {
                    continue;
                }
                int ct = t * m;
                for (int j = 0; j < m; j++) {
                    c[ct + j] += av * b[bi + j];
                }
            }
        }
    }

    /** {@code c[n x m] = a[n x k] * b[k x m]}, row-major; {@code c} is overwritten. */
    static void matmul(float[] a, float[] b, float[] c, int n, int k, int m) {
        java.util.Arrays.fill(c, 0, n * m, 0f);
        addMatmul(a, b, c, n, k, m);
    }

    /** {@code c[n x m] += a[n x k] * b[k x m]}, row-major. */
    static void addMatmul(float[] a, float[] b, float[] c, int n, int k, int m) {
        for (int i = 0; i < n; i++) {
            int ai = i * k;
            int ci = i * m;
            for (int t = 0; t < k; t++) {
                float av = a[ai + t];
                int bt = t * m;
                for (int j = 0; j < m; j++) {
                    c[ci + j] += av * b[bt + j];
                }
            }
        }
    }
}
