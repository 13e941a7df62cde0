package dev.rungbook.samples;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.nn.BatchNorm;
import dev.rungbook.nn.Conv2d;
import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.Flatten;
import dev.rungbook.nn.Linear;
import dev.rungbook.nn.Network;
import dev.rungbook.nn.Pool2d;
import dev.rungbook.nn.Relu;
import dev.rungbook.nn.Trainer;
import dev.rungbook.progress.Progress;
import dev.rungbook.tensor.DType;
import dev.rungbook.tensor.Tensor;
import java.io.PrintStream;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.Locale;
import java.util.Map;

/**
 * Makes everything in {@code sample-tensors/} from seeds: simulates the {@link ConveyorScenario} and
 * {@link SolarThermalScenario} data sets, trains the MLP and the conv net with Rungbook's own {@link Trainer}, and
 * writes the checkpoints and data files. Re-running it
 * reproduces the committed files bit for bit on the same JDK.
 */
public final class SampleGenerator {
    /** Seeds, fixed so that the committed files can be regenerated. */
    static final long TRAIN_SEED = 101;
    static final long CALIBRATION_SEED = 202;
    static final long VALIDATION_SEED = 303;
    static final long TEST_SEED = 404;
    static final long INIT_SEED = 7;
    static final long IMBALANCE_SEED = 11;

    /** Seeds of the solar-farm thermal tiles and their conv net. */
    static final long THERMAL_TRAIN_SEED = 505;
    static final long THERMAL_CALIBRATION_SEED = 606;
    static final long THERMAL_VALIDATION_SEED = 707;
    static final long THERMAL_TEST_SEED = 808;
    static final long THERMAL_INIT_SEED = 17;
    /** How the thermal conv net is trained. */
    static final int THERMAL_TRAIN_SIZE = 6000;
    static final int THERMAL_EPOCHS = 15;
    static final double THERMAL_LEARNING_RATE = 1e-3;

    /** Widths of the conveyor classifier. */
    static final int[] MLP_WIDTHS = {ConveyorScenario.FEATURES, 256, 128, ConveyorScenario.CLASSES.size()};

    private SampleGenerator() {
    }

    /**
     * What was made: the float accuracies on validation and test data of the conveyor MLP and of the thermal conv
     * net.
     */
    public record Summary(double validationAccuracy, double testAccuracy, double thermalValidationAccuracy,
            double thermalTestAccuracy, Path folder) {
    }

    /**
     * Generates the sample files into {@code folder} (created if needed), reporting training progress to
     * {@code progress} and a short log to {@code log}.
     */
    public static Summary generate(Path folder, Progress progress, PrintStream log) throws java.io.IOException {
        Files.createDirectories(folder);
        Dataset train = ConveyorScenario.generate(TRAIN_SEED, 8000);
        Dataset calibration = ConveyorScenario.generate(CALIBRATION_SEED, 512);
        Dataset validation = ConveyorScenario.generate(VALIDATION_SEED, 2000);
        Dataset test = ConveyorScenario.generate(TEST_SEED, 2000);
        log.println("training the conveyor idler classifier " + java.util.Arrays.toString(MLP_WIDTHS) + " on "
                + train.size() + " simulated samples");
        Network net = Trainer.adam(1e-3).epochs(40).batchSize(64).seed(INIT_SEED).progress(progress)
                .train(Trainer.initialMlp(INIT_SEED, MLP_WIDTHS), train);
        net = imbalanceChannels(net, IMBALANCE_SEED);
        double va = net.accuracy(validation);
        double ta = net.accuracy(test);
        log.printf(Locale.ROOT, "float accuracy: validation %.4f, test %.4f%n", va, ta);

        Map<String, String> meta = new LinkedHashMap<>();
        meta.put("scenario", "conveyor idler condition monitoring (Rungbook sample, simulated)");
        meta.put("architecture", "fc1 -> relu -> fc2 -> relu -> fc3; widths " + java.util.Arrays.toString(MLP_WIDTHS));
        meta.put("inputs", ConveyorScenario.BINS + " log10 spectrum bins (0-2 kHz) then "
                + String.join(", ", ConveyorScenario.READINGS));
        meta.put("classes", String.join(", ", ConveyorScenario.CLASSES));
        meta.put("validation_accuracy", String.format(Locale.ROOT, "%.4f", va));
        meta.put("test_accuracy", String.format(Locale.ROOT, "%.4f", ta));
        meta.put("generator", "rungbook samples (dev.rungbook.samples.SampleGenerator)");

        writeModel(folder, "conveyor-mlp", net.parameters(), meta);
        writeDataset(folder.resolve("conveyor-calibration.npz"), calibration);
        writeDataset(folder.resolve("conveyor-validation.npz"), validation);
        writeDataset(folder.resolve("conveyor-test.npz"), test);
        double[] thermal = generateThermal(folder, progress, log);
        return new Summary(va, ta, thermal[0], thermal[1], folder);
    }

    /**
     * The untrained thermal conv net: conv1 (1 -> 8, 3x3, padding 1), bn1, ReLU, 2x2 max pool, conv2 (8 -> 16, 3x3,
     * padding 1), bn2, ReLU, 2x2 max pool, flatten, fc (256 -> 4).
     */
    static Network initialThermalNet(long seed) {
        return Network.of(Conv2d.initial("conv1", 1, 8, 3, 1, 1, seed), BatchNorm.initial("bn1", 8),
                new Relu("relu1"), Pool2d.max("pool1", 2, 2), Conv2d.initial("conv2", 8, 16, 3, 1, 1, seed + 1),
                BatchNorm.initial("bn2", 16), new Relu("relu2"), Pool2d.max("pool2", 2, 2), new Flatten("flatten"),
                Linear.initial("fc", 256, SolarThermalScenario.CLASSES.size(), seed + 2));
    }

    /**
     * The thermal conv net's architecture text (see {@code Network.fromArchitecture}), written to the checkpoints'
     * {@code architecture} metadata.
     */
    static final String THERMAL_ARCHITECTURE = "conv1 [8,1,3,3] stride 1 padding 1 -> bn1 -> relu -> maxpool 2/2 -> "
            + "conv2 [16,8,3,3] stride 1 padding 1 -> bn2 -> relu -> maxpool 2/2 -> flatten -> fc [4,256]; "
            + "batch norm eps 1e-5";

    /** The thermal conv net from checkpoint tensors (the layout {@link #initialThermalNet} trains). */
    public static Network thermalNet(Map<String, Tensor> tensors) {
        return Network.fromArchitecture(tensors, THERMAL_ARCHITECTURE);
    }

    private static double[] generateThermal(Path folder, Progress progress, PrintStream log) {
        Dataset train = SolarThermalScenario.generate(THERMAL_TRAIN_SEED, THERMAL_TRAIN_SIZE);
        Dataset calibration = SolarThermalScenario.generate(THERMAL_CALIBRATION_SEED, 512);
        Dataset validation = SolarThermalScenario.generate(THERMAL_VALIDATION_SEED, 2000);
        Dataset test = SolarThermalScenario.generate(THERMAL_TEST_SEED, 2000);
        log.println("training the solar-farm thermal tile conv net on " + train.size() + " simulated tiles");
        Network net = Trainer.adam(THERMAL_LEARNING_RATE).epochs(THERMAL_EPOCHS).batchSize(64).seed(THERMAL_INIT_SEED)
                .progress(progress).train(initialThermalNet(THERMAL_INIT_SEED), train);
        double va = net.accuracy(validation);
        double ta = net.accuracy(test);
        log.printf(Locale.ROOT, "thermal conv net float accuracy: validation %.4f, test %.4f%n", va, ta);
        Map<String, String> meta = new LinkedHashMap<>();
        meta.put("scenario", "solar farm drone thermography, 16x16 tiles (Rungbook sample, simulated)");
        meta.put("architecture", THERMAL_ARCHITECTURE);
        meta.put("inputs", "[N, 1, 16, 16] module temperature rise over ambient, in units of 10 K");
        meta.put("classes", String.join(", ", SolarThermalScenario.CLASSES));
        meta.put("validation_accuracy", String.format(Locale.ROOT, "%.4f", va));
        meta.put("test_accuracy", String.format(Locale.ROOT, "%.4f", ta));
        meta.put("generator", "rungbook samples (dev.rungbook.samples.SampleGenerator)");
        writeModel(folder, "thermal-cnn", net.parameters(), meta);
        writeDataset(folder.resolve("thermal-calibration.npz"), calibration);
        writeDataset(folder.resolve("thermal-validation.npz"), validation);
        writeDataset(folder.resolve("thermal-test.npz"), test);
        return new double[] {va, ta};
    }

    /** Writes {@code NAME.f32.safetensors} and {@code NAME.bf16.safetensors}. */
    private static void writeModel(Path folder, String name, Map<String, Tensor> params, Map<String, String> meta) {
        Checkpoint.write(folder.resolve(name + ".f32.safetensors"), params, meta);
        Map<String, Tensor> bf16 = new LinkedHashMap<>();
        params.forEach((k, v) -> bf16.put(k, v.withDType(DType.BF16)));
        Checkpoint.write(folder.resolve(name + ".bf16.safetensors"), bf16, meta);
    }

    /**
     * Scales each output channel i of fc1 (weight row and bias) by a seeded log-normal factor s_i = exp(1.2 z) and
     * input column i of fc2 by 1/s_i. Because ReLU is positively homogeneous, the network computes the same function
     * (up to float rounding); but fc1's per-channel ranges now differ by nearly three orders of magnitude, as they do in
     * real networks after BatchNorm folding, which is what per-tensor quantization and equalization are about.
     */
    static Network imbalanceChannels(Network net, long seed) {
        java.util.List<dev.rungbook.nn.Linear> lin = net.linearLayers();
        dev.rungbook.nn.Linear fc1 = lin.get(0);
        dev.rungbook.nn.Linear fc2 = lin.get(1);
        int channels = fc1.outFeatures();
        java.util.Random r = new java.util.Random(seed);
        float[] w1 = fc1.weight().toFloatArray();
        float[] b1 = fc1.bias().toFloatArray();
        float[] w2 = fc2.weight().toFloatArray();
        int in1 = fc1.inFeatures();
        for (int i = 0; i < channels; i++) {
            float scale = (float) Math.exp(1.2 * r.nextGaussian());
            for (int j = 0; j < in1; j++) {
                w1[i * in1 + j] *= scale;
            }
            b1[i] *= scale;
            for (int o = 0; o < fc2.outFeatures(); o++) {
                w2[o * channels + i] /= scale;
            }
        }
        Tensor nw1 = Tensor.of(w1, fc1.weight().shape());
        Tensor nb1 = Tensor.of(b1, fc1.bias().shape());
        Tensor nw2 = Tensor.of(w2, fc2.weight().shape());
        return net.mapLinear(l -> l == fc1 ? l.withWeight(nw1).withBias(nb1) : l == fc2 ? l.withWeight(nw2) : l);
    }

    private static void writeDataset(Path file, Dataset d) {
        int[] labels = d.labels();
        float[] y = new float[labels.length];
        for (int i = 0; i < y.length; i++) {
            y[i] = labels[i];
        }
        Map<String, Tensor> m = new LinkedHashMap<>();
        m.put("inputs", d.inputs().withName("inputs"));
        m.put("labels", Tensor.of(y, y.length).withDType(DType.I32).withName("labels"));
        Checkpoint.write(file, m, Map.of());
    }
}
