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
