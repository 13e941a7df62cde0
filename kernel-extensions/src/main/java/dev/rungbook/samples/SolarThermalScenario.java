package dev.rungbook.samples;

import dev.rungbook.nn.Dataset;
import dev.rungbook.tensor.Tensor;
import java.util.List;
import java.util.Random;

/**
 * The second sample scenario, invented for Rungbook: fault screening of a utility-scale solar farm from drone
 * thermography. A radiometric camera flies the rows at midday; each 16 x 16 pixel tile covers a 4 x 4 block of cells of
 * one module, and a small convolutional model on the drone flags tiles for the maintenance crew.
 *
 * <p>Pixels are module temperature rise over ambient, in units of 10 K ({@code (T - T_ambient) / 10}). A healthy
 * tile is an operating temperature set by irradiance (15 to 35 K above ambient), a linear gradient from wind cooling,
 * a slight offset per cell, an optional cool aluminium frame along one edge and camera noise (NETD about 0.1 K, plus
 * drift). Classes: 0 normal, 1 hot spot (a small, sharp blob of 6 to 25 K on part of a cell: a crack or a dropping),
 * 2 hot cell (one whole cell 3 to 10 K warmer: a mismatched or shunted cell), 3 active bypass diode (a substring
 * strip of four to six columns 2.5 to 7 K warmer). In every class, about one tile in six carries a sun glint, an
 * elongated bright reflection that is not a fault. The simulator is seeded: the same seed gives the same tiles on
 * every machine. The physics is deliberately simple.
 */
public final class SolarThermalScenario {
    /** Tile height and width in pixels. */
    public static final int SIZE = 16;
    /** Pixels per cell side. */
    public static final int CELL = 4;
    /** Class names, by label. */
    public static final List<String> CLASSES = List.of("normal", "hot_spot", "hot_cell", "bypass_diode");

    private SolarThermalScenario() {
    }

    /** {@code n} tiles shaped {@code [n, 1, 16, 16]} drawn with the given seed; classes are drawn uniformly. */
    public static Dataset generate(long seed, int n) {
        Random r = new Random(seed);
        int px = SIZE * SIZE;
        float[] x = new float[n * px];
        int[] y = new int[n];
        double[] t = new double[px];
        for (int s = 0; s < n; s++) {
            int label = r.nextInt(CLASSES.size());
            y[s] = label;
            double rise = 15 + 20 * r.nextDouble();
            double gx = 0.25 * r.nextGaussian();
            double gy = 0.25 * r.nextGaussian();
            double[] cellOffset = new double[(SIZE / CELL) * (SIZE / CELL)];
            for (int c = 0; c < cellOffset.length; c++) {
                cellOffset[c] = 0.5 * r.nextGaussian();
            }
            for (int i = 0; i < SIZE; i++) {
                for (int j = 0; j < SIZE; j++) {
                    t[i * SIZE + j] = rise + gx * (j - 7.5) + gy * (i - 7.5)
                            + cellOffset[(i / CELL) * (SIZE / CELL) + j / CELL];
                }
            }
            if (r.nextDouble() < 0.3) {
                frame(t, r.nextInt(4), 1 + r.nextInt(2), 4 + 6 * r.nextDouble());
            }
            switch (label) {
                case 1:
                    blob(t, 1 + 14 * r.nextDouble(), 1 + 14 * r.nextDouble(), 0.6 + 0.5 * r.nextDouble(),
                            6 + 19 * r.nextDouble());
                    break;
                case 2: {
                    int ci = r.nextInt(SIZE / CELL);
                    int cj = r.nextInt(SIZE / CELL);
                    double d = 3 + 7 * r.nextDouble();
                    for (int i = ci * CELL; i < (ci + 1) * CELL; i++) {
                        for (int j = cj * CELL; j < (cj + 1) * CELL; j++) {
                            t[i * SIZE + j] += d;
                        }
                    }
                    break;
                }
                case 3: {
                    int width = 4 + r.nextInt(3);
                    int start = r.nextInt(SIZE - width + 1);
                    double d = 2.5 + 4.5 * r.nextDouble();
                    for (int i = 0; i < SIZE; i++) {
                        for (int j = start; j < start + width; j++) {
                            t[i * SIZE + j] += d;
                        }
                    }
                    break;
                }
                default:
                    break;
            }
            if (r.nextDouble() < 1.0 / 6) {
                glint(t, r);
            }
            double drift = 0.3 * r.nextGaussian();
            int base = s * px;
            for (int k = 0; k < px; k++) {
                x[base + k] = (float) ((t[k] + drift + 0.1 * r.nextGaussian()) / 10);
            }
        }
        return new Dataset(Tensor.of(x, n, 1, SIZE, SIZE).withName("inputs"), y);
    }

    /** A Gaussian blob of peak {@code d} kelvin and width {@code sigma} pixels. */
    private static void blob(double[] t, double ci, double cj, double sigma, double d) {
        for (int i = 0; i < SIZE; i++) {
            for (int j = 0; j < SIZE; j++) {
                double q = ((i - ci) * (i - ci) + (j - cj) * (j - cj)) / (2 * sigma * sigma);
                t[i * SIZE + j] += d * Math.exp(-q);
            }
        }
    }

    /** The cooler module frame along one edge ({@code side} 0..3), {@code width} pixels. */
    private static void frame(double[] t, int side, int width, double cooler) {
        for (int i = 0; i < SIZE; i++) {
            for (int j = 0; j < SIZE; j++) {
                boolean in = side == 0 ? i < width : side == 1 ? i >= SIZE - width : side == 2 ? j < width
                        : j >= SIZE - width;
                if (in) {
                    t[i * SIZE + j] -= cooler;
                }
            }
        }
    }

    /** An elongated bright reflection along a random direction: long, soft and moderately bright. */
    private static void glint(double[] t, Random r) {
        double ci = 2 + 12 * r.nextDouble();
        double cj = 2 + 12 * r.nextDouble();
        double angle = Math.PI * r.nextDouble();
        double ca = Math.cos(angle);
        double sa = Math.sin(angle);
        double d = 3 + 5 * r.nextDouble();
        for (int i = 0; i < SIZE; i++) {
            for (int j = 0; j < SIZE; j++) {
                double along = (i - ci) * ca + (j - cj) * sa;
                double across = -(i - ci) * sa + (j - cj) * ca;
                t[i * SIZE + j] += d * Math.exp(-along * along / (2 * 16) - across * across / (2 * 0.8));
            }
        }
    }
}
