package dev.rungbook.internal;

import dev.ludovic.netlib.blas.BLAS;
import dev.ludovic.netlib.blas.NativeBLAS;
import dev.ludovic.netlib.lapack.LAPACK;
import dev.ludovic.netlib.lapack.NativeLAPACK;
import java.io.IOException;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Locale;
import java.util.Optional;
import java.util.stream.IntStream;
import org.netlib.util.intW;

/**
 * Dense row-major matrix kernels for learned rounding: matrix products, Gram matrices and Cholesky factorisations.
 * Internal.
 *
 * <p>All matrices are row-major arrays: element {@code (i, j)} of a matrix with leading dimension {@code ld} stored
 * from offset {@code off} is {@code a[off + i * ld + j]}. Every method states which arguments it modifies.
 *
 * <p>Two backends do the same work:
 * <ul>
 *   <li><b>native BLAS</b>: the system BLAS/LAPACK (e.g. Debian's OpenBLAS) through dev.ludovic.netlib's JNI
 *       bindings, used when they load. Row-major data are handed to the column-major routines as their transposes
 *       (a row-major array read column-major is the transposed matrix), so no copies are made.</li>
 *   <li><b>pure Java</b>: cache-blocked loops written so the JIT vectorises the innermost loop ({@code i-k-j} order,
 *       the innermost loop an axpy over a contiguous row), split over rows across the common fork-join pool for
 *       large products. Cholesky is blocked right-looking; triangular inverses are blocked and use the same
 *       product kernel.</li>
 * </ul>
 * {@link #instance()} picks native BLAS when it loads, unless the system property {@code rungbook.blas=java} forces
 * the pure-Java path (for tests and benchmarks). {@link #backend()} says which one runs.
 */
public final class LinearAlgebra {
    /** Products below this many multiply-adds run on the calling thread only. */
    private static final long PARALLEL_MIN = 1L << 19;
    /**
     * Tile of B the pure-Java product keeps in the level-1 cache (32 KB): depth (k) and width (n), float and double.
     * The innermost loop is one axpy of a C row segment with a B tile row, which the JIT vectorises.
     */
    private static final int SKC = 32;
    private static final int SNC = 256;
    private static final int DKC = 32;
    private static final int DNC = 128;
    /** Block size of the pure-Java Cholesky and triangular inverse. */
    private static final int NB = 64;

    private final BLAS blas;
    private final LAPACK lapack;
    private final String backend;

    private LinearAlgebra(BLAS blas, LAPACK lapack, String backend) {
        this.blas = blas;
        this.lapack = lapack;
        this.backend = backend;
    }

    private static final class Default {
        static final LinearAlgebra INSTANCE = choose();

        private static LinearAlgebra choose() {
            String forced = System.getProperty("rungbook.blas", "").strip().toLowerCase(Locale.ROOT);
            if (forced.equals("java")) {
                return PureJava.INSTANCE;
            }
            return Native.INSTANCE != null ? Native.INSTANCE : PureJava.INSTANCE;
        }
    }

    private static final class PureJava {
        static final LinearAlgebra INSTANCE = new LinearAlgebra(null, null, "pure Java");
    }

    private static final class Native {
        static final LinearAlgebra INSTANCE = load();

        private static LinearAlgebra load() {
            BLAS b;
            try {
                b = NativeBLAS.getInstance();
            } catch (Throwable e) { // no system BLAS: UnsatisfiedLinkError, ExceptionInInitializerError, ...
                return null;
            }
            LAPACK l;
            try {
                l = NativeLAPACK.getInstance();
            } catch (Throwable e) {
                l = null;
            }
            String name = b.getClass().getSimpleName() + ", " + systemLibrary();
            return new LinearAlgebra(b, l, "native BLAS (" + name + (l == null ? "; Cholesky in pure Java" : "")
                    + ")");
        }

        /** Which system library the JNI bindings loaded, read from the process's memory map where there is one. */
        private static String systemLibrary() {
            try {
                String maps = Files.readString(Path.of("/proc/self/maps"));
                String lower = maps.toLowerCase(Locale.ROOT);
                if (lower.contains("openblas")) {
                    return "OpenBLAS";
                }
                if (lower.contains("libmkl")) {
                    return "MKL";
                }
                if (lower.contains("blis")) {
                    return "BLIS";
                }
                if (lower.contains("atlas")) {
                    return "ATLAS";
                }
            } catch (IOException | RuntimeException e) {
                // not Linux: fall through
            }
            return "system BLAS";
        }
    }

    /** The backend used by the library: native BLAS when it loads (unless {@code rungbook.blas=java}), else Java. */
    public static LinearAlgebra instance() {
        return Default.INSTANCE;
    }

    /** The pure-Java backend. */
    public static LinearAlgebra pureJava() {
        return PureJava.INSTANCE;
    }

    /** The native backend, if the system BLAS loads on this machine. */
    public static Optional<LinearAlgebra> nativeBlas() {
        return Optional.ofNullable(Native.INSTANCE);
    }

    /** Which backend this is, e.g. {@code "native BLAS (JNIBLAS, OpenBLAS)"} or {@code "pure Java"}. */
    public String backend() {
        return backend;
    }

    /** Whether products run in the system BLAS. */
    public boolean isNative() {
        return blas != null;
    }

    @Override
    public String toString() {
        return "LinearAlgebra[" + backend + "]";
    }

    // ================================================================== products

    /**
     * {@code C = alpha * op(A) * op(B) + beta * C} in float32, row-major; {@code op(X)} is {@code X} or its
     * transpose. {@code C} is {@code m x n}, {@code op(A)} is {@code m x k}, {@code op(B)} is {@code k x n}. Only
     * {@code c} is modified. With {@code beta == 0} the old contents of {@code C} are ignored (NaN included).
     *
     * @param transA whether {@code op(A) = A^T} (then {@code A} is stored {@code k x m})
     * @param transB whether {@code op(B) = B^T} (then {@code B} is stored {@code n x k})
     */
    public void sgemm(boolean transA, boolean transB, int m, int n, int k, float alpha, float[] a, int aOff, int lda,
            float[] b, int bOff, int ldb, float beta, float[] c, int cOff, int ldc) {
        checkGemm(transA, transB, m, n, k, a.length, aOff, lda, b.length, bOff, ldb, c.length, cOff, ldc);
        if (m == 0 || n == 0) {
            return;
        }
        if (blas != null) {
            // Row-major C = op(A) op(B) is column-major C^T = op(B)^T op(A)^T, and a row-major array read
            // column-major is the transpose: so swap the operands and keep the flags.
            blas.sgemm(transB ? "T" : "N", transA ? "T" : "N", n, m, k, alpha, b, bOff, Math.max(1, ldb), a, aOff,
                    Math.max(1, lda), beta, c, cOff, Math.max(1, ldc));
            return;
        }
        javaSgemm(transA, transB, m, n, k, alpha, a, aOff, lda, b, bOff, ldb, beta, c, cOff, ldc);
    }

    /** {@code C = op(A) * op(B)} for dense row-major arrays with their natural leading dimensions; {@code c} is overwritten. */
    public void sgemm(boolean transA, boolean transB, int m, int n, int k, float[] a, float[] b, float[] c) {
        sgemm(transA, transB, m, n, k, 1f, a, 0, transA ? m : k, b, 0, transB ? k : n, 0f, c, 0, n);
    }

    /** {@code C = alpha * op(A) * op(B) + beta * C} in float64; as {@link #sgemm(boolean, boolean, int, int, int,
     * float, float[], int, int, float[], int, int, float, float[], int, int)}. Only {@code c} is modified. */
    public void dgemm(boolean transA, boolean transB, int m, int n, int k, double alpha, double[] a, int aOff, int lda,
            double[] b, int bOff, int ldb, double beta, double[] c, int cOff, int ldc) {
        checkGemm(transA, transB, m, n, k, a.length, aOff, lda, b.length, bOff, ldb, c.length, cOff, ldc);
        if (m == 0 || n == 0) {
            return;
        }
        if (blas != null) {
            blas.dgemm(transB ? "T" : "N", transA ? "T" : "N", n, m, k, alpha, b, bOff, Math.max(1, ldb), a, aOff,
                    Math.max(1, lda), beta, c, cOff, Math.max(1, ldc));
            return;
        }
        javaDgemm(transA, transB, m, n, k, alpha, a, aOff, lda, b, bOff, ldb, beta, c, cOff, ldc);
    }

    /** {@code C = op(A) * op(B)} in float64 for dense row-major arrays; {@code c} is overwritten. */
    public void dgemm(boolean transA, boolean transB, int m, int n, int k, double[] a, double[] b, double[] c) {
        dgemm(transA, transB, m, n, k, 1.0, a, 0, transA ? m : k, b, 0, transB ? k : n, 0.0, c, 0, n);
    }

    /**
     * The Gram matrix {@code X^T X} ({@code cols x cols}, full and symmetric, float64) of the row-major
     * {@code rows x cols} matrix {@code x}. The products run in float32 over chunks of 256 rows and are summed in
     * float64, so the rounding error grows with the chunk length rather than with {@code rows}. {@code x} is not
     * modified.
     */
    public double[] gram(float[] x, int rows, int cols) {
        Checks.require(rows >= 0 && cols >= 0 && (long) rows * cols <= x.length,
                "gram: %d x %d matrix needs %d values, array has %d", rows, cols, (long) rows * cols, x.length);
        double[] g = new double[Math.multiplyExact(cols, cols)];
        float[] part = new float[cols * cols];
        int chunk = 256;
        for (int r0 = 0; r0 < rows; r0 += chunk) {
            int r = Math.min(chunk, rows - r0);
            sgemm(true, false, cols, cols, r, 1f, x, r0 * cols, cols, x, r0 * cols, cols, 0f, part, 0, cols);
            for (int i = 0; i < g.length; i++) {
                g[i] += part[i];
            }
        }
        // Symmetrise exactly (the products are symmetric up to summation order).
        for (int i = 0; i < cols; i++) {
            for (int j = 0; j < i; j++) {
                double v = 0.5 * (g[i * cols + j] + g[j * cols + i]);
                g[i * cols + j] = v;
                g[j * cols + i] = v;
            }
        }
        return g;
    }

    private static void checkGemm(boolean ta, boolean tb, int m, int n, int k, int aLen, int aOff, int lda, int bLen,
            int bOff, int ldb, int cLen, int cOff, int ldc) {
        Checks.require(m >= 0 && n >= 0 && k >= 0, "gemm: negative size m=%d n=%d k=%d", m, n, k);
        checkMatrix("A", ta ? k : m, ta ? m : k, aLen, aOff, lda);
        checkMatrix("B", tb ? n : k, tb ? k : n, bLen, bOff, ldb);
        checkMatrix("C", m, n, cLen, cOff, ldc);
    }

    private static void checkMatrix(String what, int rows, int cols, int len, int off, int ld) {
        if (rows == 0 || cols == 0) {
            return;
        }
        Checks.require(ld >= cols, "gemm: %s is %d x %d but its leading dimension is %d", what, rows, cols, ld);
        long last = off + (long) (rows - 1) * ld + cols;
        Checks.require(off >= 0 && last <= len, "gemm: %s (%d x %d, offset %d, ld %d) needs %d values, array has %d",
                what, rows, cols, off, ld, last, len);
    }

    // ------------------------------------------------------------------ pure-Java products

    @FunctionalInterface
    private interface RowBody {
        void run(int from, int to);
    }

    /** Runs {@code body} over {@code [0, m)}, split across the common pool when the work is large. */
    private static void parallelRows(int m, long work, RowBody body) {
        int threads = Math.min(Runtime.getRuntime().availableProcessors(), 8);
        int tasks = work < PARALLEL_MIN || m < 2 || threads < 2 ? 1 : Math.min(m, threads);
        if (tasks == 1) {
            body.run(0, m);
            return;
        }
        IntStream.range(0, tasks).parallel().forEach(t -> body.run((int) ((long) m * t / tasks),
                (int) ((long) m * (t + 1) / tasks)));
    }

    private static void javaSgemm(boolean ta, boolean tb, int m, int n, int k, float alpha, float[] a, int ao, int lda,
            float[] b, int bo, int ldb, float beta, float[] c, int co, int ldc) {
        parallelRows(m, (long) m * n * Math.max(k, 1), (i0, i1) -> {
            for (int i = i0; i < i1; i++) {
                int r = co + i * ldc;
                if (beta == 0) {
                    java.util.Arrays.fill(c, r, r + n, 0f);
                } else if (beta != 1) {
                    for (int j = 0; j < n; j++) {
                        c[r + j] *= beta;
                    }
                }
            }
            if (k == 0 || alpha == 0) {
                return;
            }
            float[][] rows = new float[SKC][SNC];
            float[] acc = new float[SNC];
            int sa = ta ? lda : 1; // step along k in A
            for (int jc = 0; jc < n; jc += SNC) {
                int nb = Math.min(SNC, n - jc);
                for (int pc = 0; pc < k; pc += SKC) {
                    int kb = Math.min(SKC, k - pc);
                    // Copy the tile op(B)[pc:pc+kb, jc:jc+nb] into separate row arrays.
                    for (int p = 0; p < kb; p++) {
                        if (tb) {
                            float[] row = rows[p];
                            int from = bo + jc * ldb + pc + p;
                            for (int j = 0; j < nb; j++) {
                                row[j] = b[from + j * ldb];
                            }
                        } else {
                            System.arraycopy(b, bo + (pc + p) * ldb + jc, rows[p], 0, nb);
                        }
                    }
                    for (int i = i0; i < i1; i++) {
                        int cr = co + i * ldc + jc;
                        int ar = ta ? ao + pc * lda + i : ao + i * lda + pc;
                        System.arraycopy(c, cr, acc, 0, nb);
                        for (int p = 0; p < kb; p++) {
                            axpy(nb, alpha * a[ar + p * sa], rows[p], acc);
                        }
                        System.arraycopy(acc, 0, c, cr, nb);
                    }
                }
            }
        });
    }

    private static void javaDgemm(boolean ta, boolean tb, int m, int n, int k, double alpha, double[] a, int ao, int lda,
            double[] b, int bo, int ldb, double beta, double[] c, int co, int ldc) {
        parallelRows(m, (long) m * n * Math.max(k, 1), (i0, i1) -> {
            for (int i = i0; i < i1; i++) {
                int r = co + i * ldc;
                if (beta == 0) {
                    java.util.Arrays.fill(c, r, r + n, 0.0);
                } else if (beta != 1) {
                    for (int j = 0; j < n; j++) {
                        c[r + j] *= beta;
                    }
                }
            }
            if (k == 0 || alpha == 0) {
                return;
            }
            double[][] rows = new double[DKC][DNC];
            double[] acc = new double[DNC];
            int sa = ta ? lda : 1; // step along k in A
            for (int jc = 0; jc < n; jc += DNC) {
                int nb = Math.min(DNC, n - jc);
                for (int pc = 0; pc < k; pc += DKC) {
                    int kb = Math.min(DKC, k - pc);
                    // Copy the tile op(B)[pc:pc+kb, jc:jc+nb] into separate row arrays.
                    for (int p = 0; p < kb; p++) {
                        if (tb) {
                            double[] row = rows[p];
                            int from = bo + jc * ldb + pc + p;
                            for (int j = 0; j < nb; j++) {
                                row[j] = b[from + j * ldb];
                            }
                        } else {
                            System.arraycopy(b, bo + (pc + p) * ldb + jc, rows[p], 0, nb);
                        }
                    }
                    for (int i = i0; i < i1; i++) {
                        int cr = co + i * ldc + jc;
                        int ar = ta ? ao + pc * lda + i : ao + i * lda + pc;
                        System.arraycopy(c, cr, acc, 0, nb);
                        for (int p = 0; p < kb; p++) {
                            axpy(nb, alpha * a[ar + p * sa], rows[p], acc);
                        }
                        System.arraycopy(acc, 0, c, cr, nb);
                    }
                }
            }
        });
    }

    /**
     * {@code y[0:n] += alpha * x[0:n]}. Both arrays are indexed alike, which lets the JIT vectorise the loop even
     * though it cannot prove that {@code x} and {@code y} are different arrays.
     */
    public static void axpy(int n, float alpha, float[] x, float[] y) {
        for (int j = 0; j < n; j++) {
            y[j] += alpha * x[j];
        }
    }

    /** {@code y[0:n] += alpha * x[0:n]} (see the float version). */
    public static void axpy(int n, double alpha, double[] x, double[] y) {
        for (int j = 0; j < n; j++) {
            y[j] += alpha * x[j];
        }
    }

    /** {@code y[from:to] += alpha * x[from:to]}, both arrays indexed alike. */
    static void axpy(int from, int to, double alpha, double[] x, double[] y) {
        for (int j = from; j < to; j++) {
            y[j] += alpha * x[j];
        }
    }

    // ================================================================== Cholesky

    /**
     * Cholesky factorisation in place: on success {@code a} ({@code n x n}, row-major, symmetric positive definite;
     * only the lower triangle is read) holds the lower factor {@code L} with {@code A = L L^T} and zeros above the
     * diagonal. Returns false, leaving {@code a} unspecified, when {@code A} is not (numerically) positive definite.
     */
    public boolean cholesky(double[] a, int n) {
        checkSquare(a, n, "cholesky");
        if (n == 0) {
            return true;
        }
        boolean ok;
        if (lapack != null) {
            // Row-major lower = column-major upper of the same (symmetric) matrix.
            intW info = new intW(0);
            lapack.dpotrf("U", n, a, n, info);
            ok = info.val == 0;
        } else {
            ok = javaCholesky(a, n);
        }
        if (ok) {
            zeroUpper(a, n);
        }
        return ok;
    }

    /**
     * Inverse from a Cholesky factor, in place: {@code l} holds the lower factor {@code L} from {@link #cholesky}
     * and is overwritten with the full symmetric {@code A^-1 = L^-T L^-1}.
     */
    public void choleskyInverse(double[] l, int n) {
        checkSquare(l, n, "choleskyInverse");
        if (n == 0) {
            return;
        }
        if (lapack != null) {
            intW info = new intW(0);
            lapack.dpotri("U", n, l, n, info);
            Checks.require(info.val == 0, "choleskyInverse: factor is singular at diagonal %d", info.val);
        } else {
            javaLowerInverse(l, n);
            // A^-1 = X^T X with X = L^-1 (lower triangular).
            double[] x = l.clone();
            javaDgemm(true, false, n, n, n, 1.0, x, 0, n, x, 0, n, 0.0, l, 0, n);
        }
        mirrorLower(l, n);
    }

    /**
     * The inverse of a symmetric positive definite matrix, in place; returns false (leaving {@code a} unspecified)
     * when it is not positive definite.
     */
    public boolean invertSpd(double[] a, int n) {
        if (!cholesky(a, n)) {
            return false;
        }
        choleskyInverse(a, n);
        return true;
    }

    /**
     * The upper Cholesky factor of the inverse, in place: on success {@code h} (SPD, {@code n x n}) holds the upper
     * triangular {@code U} with positive diagonal and {@code H^-1 = U^T U}, zeros below the diagonal. This is the
     * factor error-feedback rounding walks through. Returns false when {@code H} is not positive definite (contents
     * then unspecified).
     *
     * <p>Native: factor, invert from the factor, factor again (three LAPACK calls). Pure Java: with {@code J} the
     * order-reversing permutation, factor {@code J H J = L' L'^T}; then {@code H = (J L' J)(J L' J)^T} with
     * {@code J L' J} upper triangular, so {@code H^-1 = (J L'^-1 J)^T (J L'^-1 J)} and {@code U = J L'^-1 J} by
     * uniqueness of the factor: one factorisation and one triangular inverse instead of three steps.
     */
    public boolean inverseUpperCholesky(double[] h, int n) {
        checkSquare(h, n, "inverseUpperCholesky");
        if (n == 0) {
            return true;
        }
        if (lapack != null) {
            intW info = new intW(0);
            lapack.dpotrf("U", n, h, n, info); // row-major lower factor
            if (info.val != 0) {
                return false;
            }
            lapack.dpotri("U", n, h, n, info); // row-major lower triangle of H^-1
            if (info.val != 0) {
                return false;
            }
            mirrorLower(h, n);
            // Column-major lower factor of H^-1 = row-major upper U with H^-1 = U^T U.
            lapack.dpotrf("L", n, h, n, info);
            if (info.val != 0) {
                return false;
            }
            for (int i = 1; i < n; i++) {
                java.util.Arrays.fill(h, i * n, i * n + i, 0.0);
            }
            return true;
        }
        reverse(h, n);
        if (!javaCholesky(h, n)) {
            return false;
        }
        zeroUpper(h, n);
        javaLowerInverse(h, n);
        reverse(h, n);
        return true;
    }

    /** In place {@code A <- J A J}: element (i, j) moves to (n-1-i, n-1-j), i.e. the flat array is reversed. */
    private static void reverse(double[] a, int n) {
        for (int i = 0, j = n * n - 1; i < j; i++, j--) {
            double t = a[i];
            a[i] = a[j];
            a[j] = t;
        }
    }

    private static void checkSquare(double[] a, int n, String what) {
        Checks.require(n >= 0 && (long) n * n <= a.length, "%s: %d x %d matrix needs %d values, array has %d", what, n,
                n, (long) n * n, a.length);
    }

    private static void zeroUpper(double[] a, int n) {
        for (int i = 0; i < n; i++) {
            java.util.Arrays.fill(a, i * n + i + 1, (i + 1) * n, 0.0);
        }
    }

    private static void mirrorLower(double[] a, int n) {
        for (int i = 0; i < n; i++) {
            for (int j = 0; j < i; j++) {
                a[j * n + i] = a[i * n + j];
            }
        }
    }

    /** Blocked right-looking Cholesky of the lower triangle, in place (upper triangle left as garbage). */
    private static boolean javaCholesky(double[] a, int n) {
        for (int start = 0; start < n; start += NB) {
            final int k0 = start;
            final int kb = Math.min(NB, n - k0);
            final int k1 = k0 + kb;
            // 1. Diagonal block (already updated by earlier blocks), unblocked.
            for (int j = k0; j < k1; j++) {
                int rj = j * n;
                double d = a[rj + j];
                for (int p = k0; p < j; p++) {
                    d -= a[rj + p] * a[rj + p];
                }
                if (!(d > 0) || !Double.isFinite(d)) {
                    return false;
                }
                double ljj = Math.sqrt(d);
                a[rj + j] = ljj;
                for (int i = j + 1; i < k1; i++) {
                    int ri = i * n;
                    double s = a[ri + j];
                    for (int p = k0; p < j; p++) {
                        s -= a[ri + p] * a[rj + p];
                    }
                    a[ri + j] = s / ljj;
                }
            }
            if (k1 == n) {
                break;
            }
            // 2. Panel below the diagonal block: rows solve L11 x = a_i (forward substitution).
            int m2 = n - k1;
            parallelRows(m2, (long) m2 * kb * kb / 2, (r0, r1) -> {
                for (int i = k1 + r0; i < k1 + r1; i++) {
                    int ri = i * n;
                    for (int j = k0; j < k1; j++) {
                        int rj = j * n;
                        double s = a[ri + j];
                        for (int p = k0; p < j; p++) {
                            s -= a[ri + p] * a[rj + p];
                        }
                        a[ri + j] = s / a[rj + j];
                    }
                }
            });
            // 3. Trailing update of the lower triangle: A22 -= P P^T with P = A[k1:, k0:k1]. Columns of P are copied
            // to separate arrays and each row of A22 to a scratch row, so that the axpy indexes both alike.
            double[][] cols = new double[kb][m2]; // cols[p][i] = P[i][p]
            for (int i = 0; i < m2; i++) {
                int ri = (k1 + i) * n + k0;
                for (int p = 0; p < kb; p++) {
                    cols[p][i] = a[ri + p];
                }
            }
            parallelRows(m2, (long) m2 * m2 * kb / 2, (r0, r1) -> {
                double[] row = new double[m2];
                for (int i = r0; i < r1; i++) {
                    int ci = (k1 + i) * n + k1;
                    System.arraycopy(a, ci, row, 0, i + 1);
                    for (int p = 0; p < kb; p++) {
                        axpy(0, i + 1, -cols[p][i], cols[p], row);
                    }
                    System.arraycopy(row, 0, a, ci, i + 1);
                }
            });
        }
        return true;
    }

    /**
     * In place inverse of a lower triangular matrix (zeros above the diagonal, nonzero diagonal), blocked by rows:
     * for block row I, {@code X[I, :I] = -X_II * (L[I, :I] * X[:I, :I])}, the inner product by the product kernel.
     */
    private void javaLowerInverse(double[] l, int n) {
        double[] t = new double[NB * n];
        for (int i0 = 0; i0 < n; i0 += NB) {
            int ib = Math.min(NB, n - i0);
            // Invert the diagonal block in place (row by row, forward).
            double[] d = new double[ib * ib];
            for (int i = 0; i < ib; i++) {
                int ri = (i0 + i) * n + i0;
                double inv = 1.0 / l[ri + i];
                d[i * ib + i] = inv;
                for (int j = 0; j < i; j++) {
                    double s = 0;
                    for (int p = j; p < i; p++) {
                        s += l[ri + p] * d[p * ib + j];
                    }
                    d[i * ib + j] = -inv * s;
                }
            }
            if (i0 > 0) {
                // T = L[I, :i0] * X[:i0, :i0]  (ib x i0); X lower so its upper part is zero.
                javaDgemm(false, false, ib, i0, i0, 1.0, l, i0 * n, n, l, 0, n, 0.0, t, 0, i0);
                // X[I, :i0] = -D * T
                javaDgemm(false, false, ib, i0, ib, -1.0, d, 0, ib, t, 0, i0, 0.0, l, i0 * n, n);
            }
            for (int i = 0; i < ib; i++) {
                System.arraycopy(d, i * ib, l, (i0 + i) * n + i0, i + 1);
            }
        }
    }
}
