package dev.rungbook.samples;

import dev.rungbook.nn.Dataset;
import dev.rungbook.tensor.Tensor;
import java.util.List;
import java.util.Random;

/**
 * The sample scenario, invented for Rungbook: condition monitoring of the idler rollers of a long overland belt
 * conveyor. A wireless accelerometer on each idler frame reports a 64-bin vibration amplitude spectrum (0 to 2 kHz,
 * 31.25 Hz per bin, as log10 of acceleration in g) together with eight operating readings; a small classifier on the
 * gateway flags the idler's condition.
 *
 * <p>Classes: 0 healthy, 1 outer-race defect (harmonics of the outer-race passing frequency and a lifted resonance
 * band), 2 inner-race defect (harmonics of the inner-race frequency with shaft-speed sidebands), 3 imbalance or a
 * bent shell (strong once- and twice-per-revolution lines), 4 lubrication starvation (a broadband rise above 800 Hz
 * and a warm bearing). The simulator is seeded: the same seed gives the same samples on every machine.
 *
 * <p>The physics is deliberately simple (peaks, bands and a noise floor); it is meant to give a classifier whose
 * weights look like real ones — channels of very different ranges, a few large weights fed by the strongest
 * spectral lines — not to model bearings faithfully.
 */
public final class ConveyorScenario {
    /** Spectrum bins per sample. */
    public static final int BINS = 64;
    /** Width of one spectrum bin in Hz. */
    public static final double BIN_HZ = 31.25;
    /** Operating readings after the spectrum. */
    public static final List<String> READINGS = List.of("belt_speed_m_s", "load_kt_h", "ambient_c_div10",
            "bearing_temp_c_div10", "motor_current_a_div100", "hours_since_service_k", "humidity_frac",
            "position_km");
    /** Input features per sample: the spectrum then the readings. */
    public static final int FEATURES = BINS + READINGS.size();
    /** Class names, by label. */
    public static final List<String> CLASSES = List.of("healthy", "outer_race", "inner_race", "imbalance",
            "lubrication");

    private ConveyorScenario() {
    }

    /** {@code n} samples drawn with the given seed; classes are drawn uniformly. */
    public static Dataset generate(long seed, int n) {
        Random r = new Random(seed);
        float[] x = new float[n * FEATURES];
        int[] y = new int[n];
        double[] amp = new double[BINS];
        for (int s = 0; s < n; s++) {
            int label = r.nextInt(CLASSES.size());
            y[s] = label;
            double beltSpeed = 3.0 + 2.0 * r.nextDouble();
            double shaftHz = beltSpeed / (Math.PI * 0.133); // idler shell diameter 133 mm
            double load = 0.5 + 2.5 * r.nextDouble();
            double mounting = Math.exp(0.35 * r.nextGaussian()); // sensor mounting gain
            double hours = label == 4 ? 2 + 6 * r.nextDouble() : 8 * r.nextDouble() * r.nextDouble();
            // Noise floor: falls with frequency, rises with load.
            for (int k = 0; k < BINS; k++) {
                double f = (k + 0.5) * BIN_HZ;
                amp[k] = 0.004 * (1 + 0.3 * load) / Math.sqrt(1 + f / 150.0) * Math.exp(0.45 * r.nextGaussian());
            }
            addLine(amp, shaftHz, 0.01 * mounting * Math.exp(0.5 * r.nextGaussian())); // every idler shows its rotation
            switch (label) {
                case 1: {
                    double bpfo = 3.57 * shaftHz * (1 + 0.02 * r.nextGaussian());
                    double severity = 0.004 + 0.03 * r.nextDouble();
                    for (int h = 1; h <= 8; h++) {
                        addLine(amp, h * bpfo, severity * mounting / h);
                    }
                    addBand(amp, 1150 + 60 * r.nextGaussian(), 180, severity * 0.5 * mounting);
                    break;
                }
                case 2: {
                    double bpfi = 5.43 * shaftHz * (1 + 0.02 * r.nextGaussian());
                    double severity = 0.003 + 0.025 * r.nextDouble();
                    for (int h = 1; h <= 6; h++) {
                        addLine(amp, h * bpfi, severity * mounting / h);
                        addLine(amp, h * bpfi - shaftHz, 0.4 * severity * mounting / h);
                        addLine(amp, h * bpfi + shaftHz, 0.4 * severity * mounting / h);
                    }
                    addBand(amp, 1450 + 60 * r.nextGaussian(), 160, severity * 0.6 * mounting);
                    break;
                }
                case 3: {
                    double severity = 0.012 + 0.1 * r.nextDouble();
                    addLine(amp, shaftHz, severity * mounting);
                    addLine(amp, 2 * shaftHz, 0.35 * severity * mounting);
                    break;
                }
                case 4: {
                    double severity = 0.0012 + 0.008 * r.nextDouble();
                    for (int k = 0; k < BINS; k++) {
                        double f = (k + 0.5) * BIN_HZ;
                        if (f > 800) {
                            amp[k] += severity * mounting * Math.min(1.0, (f - 800) / 600) * Math.exp(0.3
                                    * r.nextGaussian());
                        }
                    }
                    break;
                }
                default:
                    break;
            }
            int base = s * FEATURES;
            for (int k = 0; k < BINS; k++) {
                x[base + k] = (float) Math.log10(amp[k]);
            }
            double ambient = -10 + 45 * r.nextDouble();
            double bearingTemp = ambient + 15 + 6 * load + (label == 4 ? 8 * r.nextDouble() : 0)
                    + (label == 2 ? 3 * r.nextDouble() : 0) + 6 * r.nextGaussian();
            x[base + BINS] = (float) beltSpeed;
            x[base + BINS + 1] = (float) load;
            x[base + BINS + 2] = (float) (ambient / 10);
            x[base + BINS + 3] = (float) (bearingTemp / 10);
            x[base + BINS + 4] = (float) ((60 + 70 * load + 10 * r.nextGaussian()) / 100);
            x[base + BINS + 5] = (float) hours;
            x[base + BINS + 6] = (float) (0.2 + 0.75 * r.nextDouble());
            x[base + BINS + 7] = (float) (12 * r.nextDouble());
        }
        return new Dataset(Tensor.of(x, n, FEATURES).withName("inputs"), y);
    }

    private static void addLine(double[] amp, double hz, double a) {
        double pos = hz / BIN_HZ - 0.5;
        int k = (int) Math.floor(pos);
        double frac = pos - k;
        if (k >= 0 && k < BINS) {
            amp[k] += a * (1 - frac);
        }
        if (k + 1 >= 0 && k + 1 < BINS) {
            amp[k + 1] += a * frac;
        }
    }

    private static void addBand(double[] amp, double centreHz, double widthHz, double a) {
        for (int k = 0; k < BINS; k++) {
            double f = (k + 0.5) * BIN_HZ;
            double d = (f - centreHz) / widthHz;
            amp[k] += a * Math.exp(-0.5 * d * d);
        }
    }
}
