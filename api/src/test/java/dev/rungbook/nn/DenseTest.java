package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;

import dev.rungbook.testing.Fixtures;
import org.junit.jupiter.api.Test;

class DenseTest {
    @Test
    void affineMatchesABruteForceDoubleProduct() {
        // Source: brute force, y = x W^T + b summed in double; odd batch and a width not divisible by 4 take the
        // kernel's remainder paths.
        for (int[] dims : new int[][] {{7, 13, 5}, {8, 16, 12}, {1, 3, 2}}) {
            int n = dims[0];
            int k = dims[1];
            int m = dims[2];
            float[] x = Fixtures.gaussian(n * 31 + k, n * k);
            float[] w = Fixtures.gaussian(m * 17 + k, m * k);
            float[] b = Fixtures.gaussian(m, m);
            float[] y = new float[n * m];
            Dense.affine(x, w, b, y, n, k, m);
            for (int i = 0; i < n; i++) {
                for (int o = 0; o < m; o++) {
                    double s = b[o];
                    double mag = Math.abs(b[o]);
                    for (int t = 0; t < k; t++) {
                        s += (double) x[i * k + t] * w[o * k + t];
                        mag += Math.abs((double) x[i * k + t] * w[o * k + t]);
                    }
                    assertEquals(s, y[i * m + o], 1e-6 * (mag + 1), "y[" + i + "," + o + "] of " + n + "x" + k + "x" + m);
                }
            }
        }
    }
}
