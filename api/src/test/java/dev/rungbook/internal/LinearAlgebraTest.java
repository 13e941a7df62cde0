package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.testing.Fixtures;
import java.util.ArrayList;
import java.util.List;
import java.util.Random;
import java.util.stream.Stream;
import org.apache.commons.math3.linear.Array2DRowRealMatrix;
import org.apache.commons.math3.linear.CholeskyDecomposition;
import org.apache.commons.math3.linear.RealMatrix;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.params.ParameterizedTest;
import org.junit.jupiter.params.provider.MethodSource;

/** Every kernel of {@link LinearAlgebra}, on both backends, against commons-math3 on seeded random matrices. */
class LinearAlgebraTest {
    static Stream<LinearAlgebra> backends() {
        List<LinearAlgebra> all = new ArrayList<>();
        all.add(LinearAlgebra.pureJava());
        LinearAlgebra.nativeBlas().ifPresent(all::add);
        return all.stream();
    }

    private static double[][] random(Random r, int rows, int cols) {
        double[][] m = new double[rows][cols];
        for (int i = 0; i < rows; i++) {
            for (int j = 0; j < cols; j++) {
                m[i][j] = r.nextGaussian();
            }
        }
        return m;
    }

    private static float[] flatF(double[][] m) {
        float[] f = new float[m.length * m[0].length];
        for (int i = 0; i < m.length; i++) {
            for (int j = 0; j < m[0].length; j++) {
                f[i * m[0].length + j] = (float) m[i][j];
            }
        }
        return f;
    }

    private static double[] flatD(double[][] m) {
        double[] f = new double[m.length * m[0].length];
        for (int i = 0; i < m.length; i++) {
            System.arraycopy(m[i], 0, f, i * m[0].length, m[0].length);
        }
        return f;
    }

    /** Rounds every entry to float, so the reference multiplies exactly the values the float kernel sees. */
    private static double[][] toFloat(double[][] m) {
        double[][] f = new double[m.length][];
        for (int i = 0; i < m.length; i++) {
            f[i] = new double[m[i].length];
            for (int j = 0; j < m[i].length; j++) {
                f[i][j] = (float) m[i][j];
            }
        }
        return f;
    }

    /** A seeded SPD matrix G^T G / k + delta I with condition number in the hundreds. */
    private static double[][] spd(Random r, int n) {
        RealMatrix g = new Array2DRowRealMatrix(random(r, n + 8, n));
        RealMatrix a = g.transpose().multiply(g).scalarMultiply(1.0 / (n + 8));
        for (int i = 0; i < n; i++) {
            a.addToEntry(i, i, 0.05);
        }
        return a.getData();
    }

    private static void assertClose(RealMatrix expected, double[] actual, int ld, double tol, String what) {
        double scale = Math.max(1e-300, expected.getNorm() / Math.sqrt(expected.getRowDimension()
                * (double) expected.getColumnDimension()));
        for (int i = 0; i < expected.getRowDimension(); i++) {
            for (int j = 0; j < expected.getColumnDimension(); j++) {
                double e = expected.getEntry(i, j);
                double a = actual[i * ld + j];
                if (Math.abs(e - a) > tol * (scale + Math.abs(e))) {
                    throw new AssertionError(what + ": (" + i + ", " + j + ") expected " + e + " got " + a);
                }
            }
        }
    }

    private static void assertClose(RealMatrix expected, float[] actual, int ld, double tol, String what) {
        double[] d = new double[actual.length];
        for (int i = 0; i < d.length; i++) {
            d[i] = actual[i];
        }
        assertClose(expected, d, ld, tol, what);
    }

    @ParameterizedTest
    @MethodSource("backends")
    void sgemmMatchesCommonsMathForAllTransposes(LinearAlgebra la) {
        Random r = Fixtures.random(11);
        // Sizes straddle the pure-Java tiles (32 x 256) and the parallel threshold.
        int[][] sizes = {{1, 1, 1}, {3, 5, 7}, {37, 300, 65}, {130, 257, 96}, {64, 64, 600}};
        for (int[] s : sizes) {
            int m = s[0];
            int n = s[1];
            int k = s[2];
            for (int t = 0; t < 4; t++) {
                boolean ta = (t & 1) != 0;
                boolean tb = (t & 2) != 0;
                double[][] a = toFloat(random(r, ta ? k : m, ta ? m : k));
                double[][] b = toFloat(random(r, tb ? n : k, tb ? k : n));
                double[][] c0 = toFloat(random(r, m, n));
                RealMatrix am = new Array2DRowRealMatrix(a);
                RealMatrix bm = new Array2DRowRealMatrix(b);
                RealMatrix opA = ta ? am.transpose() : am;
                RealMatrix opB = tb ? bm.transpose() : bm;
                // Source: commons-math3 Array2DRowRealMatrix.multiply as the reference product.
                RealMatrix expected = opA.multiply(opB).scalarMultiply(0.75)
                        .add(new Array2DRowRealMatrix(c0).scalarMultiply(-0.5));
                float[] c = flatF(c0);
                la.sgemm(ta, tb, m, n, k, 0.75f, flatF(a), 0, ta ? m : k, flatF(b), 0, tb ? k : n, -0.5f, c, 0, n);
                assertClose(expected, c, n, 1e-4, la.backend() + " sgemm " + m + "x" + n + "x" + k + " t" + t);
            }
        }
    }

    @ParameterizedTest
    @MethodSource("backends")
    void dgemmMatchesCommonsMathWithOffsetsAndLeadingDimensions(LinearAlgebra la) {
        Random r = Fixtures.random(12);
        int m = 45;
        int n = 70;
        int k = 33;
        for (int t = 0; t < 4; t++) {
            boolean ta = (t & 1) != 0;
            boolean tb = (t & 2) != 0;
            double[][] a = random(r, ta ? k : m, ta ? m : k);
            double[][] b = random(r, tb ? n : k, tb ? k : n);
            RealMatrix opA = ta ? new Array2DRowRealMatrix(a).transpose() : new Array2DRowRealMatrix(a);
            RealMatrix opB = tb ? new Array2DRowRealMatrix(b).transpose() : new Array2DRowRealMatrix(b);
            RealMatrix expected = opA.multiply(opB);
            // Embed every operand in a larger array: offset 5, leading dimension 3 more than needed.
            int lda = a[0].length + 3;
            int ldb = b[0].length + 3;
            int ldc = n + 3;
            double[] ab = embed(a, lda, 5);
            double[] bb = embed(b, ldb, 5);
            double[] cb = new double[5 + m * ldc];
            java.util.Arrays.fill(cb, Double.NaN); // beta = 0 must ignore old contents
            la.dgemm(ta, tb, m, n, k, 1.0, ab, 5, lda, bb, 5, ldb, 0.0, cb, 5, ldc);
            double[] c = new double[m * ldc];
            System.arraycopy(cb, 5, c, 0, c.length);
            assertClose(expected, c, ldc, 1e-12, la.backend() + " dgemm t" + t);
        }
    }

    private static double[] embed(double[][] m, int ld, int off) {
        double[] out = new double[off + m.length * ld];
        for (int i = 0; i < m.length; i++) {
            System.arraycopy(m[i], 0, out, off + i * ld, m[i].length);
        }
        return out;
    }

    @ParameterizedTest
    @MethodSource("backends")
    void gramMatchesCommonsMath(LinearAlgebra la) {
        Random r = Fixtures.random(13);
        double[][] x = toFloat(random(r, 700, 41));
        RealMatrix xm = new Array2DRowRealMatrix(x);
        // Source: commons-math3 X^T X.
        RealMatrix expected = xm.transpose().multiply(xm);
        double[] g = la.gram(flatF(x), 700, 41);
        assertClose(expected, g, 41, 1e-5, la.backend() + " gram");
        for (int i = 0; i < 41; i++) {
            for (int j = 0; j < 41; j++) {
                assertEquals(g[i * 41 + j], g[j * 41 + i], 0.0, "gram is exactly symmetric");
            }
        }
    }

    @ParameterizedTest
    @MethodSource("backends")
    void choleskyMatchesCommonsMath(LinearAlgebra la) {
        Random r = Fixtures.random(14);
        for (int n : new int[] {1, 2, 17, 64, 65, 150}) {
            double[][] a = spd(r, n);
            double[] l = flatD(a);
            assertTrue(la.cholesky(l, n), "SPD matrix factors");
            // Source: commons-math3 CholeskyDecomposition (lower factor L, A = L L^T).
            RealMatrix expected = new CholeskyDecomposition(new Array2DRowRealMatrix(a), 1e-12, 1e-14).getL();
            assertClose(expected, l, n, 1e-10, la.backend() + " cholesky n=" + n);
        }
    }

    @ParameterizedTest
    @MethodSource("backends")
    void inverseMatchesCommonsMath(LinearAlgebra la) {
        Random r = Fixtures.random(15);
        for (int n : new int[] {1, 3, 64, 97, 200}) {
            double[][] a = spd(r, n);
            // Source: commons-math3 CholeskyDecomposition solver inverse.
            RealMatrix inv = new CholeskyDecomposition(new Array2DRowRealMatrix(a), 1e-12, 1e-14).getSolver()
                    .getInverse();
            double[] x = flatD(a);
            assertTrue(la.invertSpd(x, n));
            assertClose(inv, x, n, 1e-9, la.backend() + " inverse n=" + n);
            double[] l = flatD(a);
            assertTrue(la.cholesky(l, n));
            la.choleskyInverse(l, n);
            assertClose(inv, l, n, 1e-9, la.backend() + " choleskyInverse n=" + n);
        }
    }

    @ParameterizedTest
    @MethodSource("backends")
    void inverseUpperCholeskyIsTheUpperFactorOfTheInverse(LinearAlgebra la) {
        Random r = Fixtures.random(16);
        for (int n : new int[] {1, 2, 63, 64, 130, 257}) {
            double[][] a = spd(r, n);
            RealMatrix inv = new CholeskyDecomposition(new Array2DRowRealMatrix(a), 1e-12, 1e-14).getSolver()
                    .getInverse();
            // Source: commons-math3; the upper factor U of H^-1 = U^T U is L^T for its lower factor L.
            RealMatrix expected = new CholeskyDecomposition(inv, 1e-9, 1e-14).getLT();
            double[] u = flatD(a);
            assertTrue(la.inverseUpperCholesky(u, n));
            assertClose(expected, u, n, 1e-9, la.backend() + " inverseUpperCholesky n=" + n);
        }
    }

    @ParameterizedTest
    @MethodSource("backends")
    void refusesMatricesThatAreNotPositiveDefinite(LinearAlgebra la) {
        double[] a = {1, 2, 2, 1}; // eigenvalues 3 and -1
        assertFalse(la.cholesky(a.clone(), 2));
        assertFalse(la.inverseUpperCholesky(a.clone(), 2));
        assertFalse(la.invertSpd(a.clone(), 2));
        double[] z = {1, 0, 0, 0}; // singular
        assertFalse(la.cholesky(z, 2));
    }

    @Test
    void refusesArraysTooShortForTheShapesNamingThem() {
        LinearAlgebra la = LinearAlgebra.pureJava();
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> la.sgemm(false, false, 4, 4, 4, new float[15], new float[16], new float[16]));
        assertTrue(e.getMessage().contains("A (4 x 4"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> la.cholesky(new double[3], 2));
    }

    @Test
    void reportsItsBackend() {
        assertEquals("pure Java", LinearAlgebra.pureJava().backend());
        LinearAlgebra.nativeBlas().ifPresent(n -> assertTrue(n.backend().startsWith("native BLAS ("), n.backend()));
        assertTrue(LinearAlgebra.instance() == LinearAlgebra.pureJava()
                || LinearAlgebra.instance() == LinearAlgebra.nativeBlas().orElseThrow());
    }
}
