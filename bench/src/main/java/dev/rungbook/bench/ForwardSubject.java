package dev.rungbook.bench;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.nn.Conv2d;
import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.IntegerNetwork;
import dev.rungbook.nn.Layer;
import dev.rungbook.nn.Linear;
import dev.rungbook.nn.Network;
import dev.rungbook.nn.NetworkQuantization;
import dev.rungbook.nn.SimulatedNetwork;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.HashMap;
import java.util.LinkedHashMap;
import java.util.Map;
import java.util.function.DoubleSupplier;
import java.util.function.Function;

/**
 * The forward passes {@link ForwardCpuTime} times, built from the sample tensors with public API that every library
 * version since the networks came has: the sample classifier {@code conveyor-mlp} (float, integer-only, simulated)
 * and the thermal-tile conv net {@code thermal-cnn} (float, batch norms folded), each on a batch of 512 validation
 * samples. {@link ForwardCpuTime} loads this class once with the library under test and, with {@code --before}, once
 * more in a class loader that takes every {@code dev.rungbook} class from an older library jar, so that the two
 * versions run side by side in one JVM.
 *
 * <p>{@code apply(name)} returns the body of a case; {@link #macs()} the multiply-adds of each.
 */
public final class ForwardSubject implements Function<String, DoubleSupplier> {
    /** Samples per batch. */
    public static final int BATCH = 512;

    private final Map<String, DoubleSupplier> cases = new LinkedHashMap<>();
    private final Map<String, Long> macs = new LinkedHashMap<>();

    private static Map<String, Tensor> tensors(Path file) {
        Map<String, Tensor> t = new HashMap<>();
        try (Checkpoint c = Checkpoint.open(file)) {
            c.tensors().forEach((k, v) -> t.put(k, Tensor.of(v.toFloatArray(), v.shape()).withName(k)));
        }
        return t;
    }

    private static Tensor firstSamples(Dataset d, int n) {
        Tensor x = d.inputs();
        int[] shape = x.shape().clone();
        int per = 1;
        for (int i = 1; i < shape.length; i++) {
            per *= shape[i];
        }
        float[] v = new float[n * per];
        System.arraycopy(x.toFloatArray(), 0, v, 0, v.length);
        shape[0] = n;
        return Tensor.of(v, shape);
    }

    /** Multiply-adds of one forward pass of {@code net} on {@code batch} (weighted layers only). */
    static long macs(Network net, Tensor batch) {
        long total = 0;
        Tensor x = batch;
        for (Layer l : net.layers()) {
            Tensor y = l.forward(x);
            if (l instanceof Linear) {
                Linear f = (Linear) l;
                total += (long) x.dim(0) * f.inFeatures() * f.outFeatures();
            } else if (l instanceof Conv2d) {
                Conv2d c = (Conv2d) l;
                long positions = (long) y.dim(2) * y.dim(3);
                total += (long) x.dim(0) * positions * c.outChannels() * c.inChannels() * c.kernelHeight()
                        * c.kernelWidth();
            }
            x = y;
        }
        return total;
    }

    /** Builds the networks from {@code samples} (the sample-tensors folder). */
    public ForwardSubject(Path samples) {
        if (!Files.isDirectory(samples)) {
            throw new IllegalArgumentException("sample-tensors not found at " + samples.toAbsolutePath());
        }
        Network mlp = Network.mlp(tensors(samples.resolve("conveyor-mlp.f32.safetensors")), "fc1", "fc2", "fc3");
        Tensor mlpBatch = firstSamples(Dataset.load(samples.resolve("conveyor-validation.npz")), BATCH);
        SimulatedNetwork sim = NetworkQuantization.of(mlp).calibrate(
                Dataset.load(samples.resolve("conveyor-calibration.npz")));
        IntegerNetwork integer = IntegerNetwork.of(sim);
        Network cnn = Network.from(tensors(samples.resolve("thermal-cnn.f32.safetensors"))).conv2d("conv1", 1, 1)
                .batchNorm("bn1").relu().maxPool(2, 2).conv2d("conv2", 1, 1).batchNorm("bn2").relu().maxPool(2, 2)
                .flatten().linear("fc").build().foldBatchNorm();
        Tensor cnnBatch = firstSamples(Dataset.load(samples.resolve("thermal-validation.npz")), BATCH);
        long mlpMacs = macs(mlp, mlpBatch);
        cases.put("mlpFloatForward", () -> mlp.forward(mlpBatch).getFlat(7));
        macs.put("mlpFloatForward", mlpMacs);
        cases.put("mlpIntegerForward", () -> integer.forwardCodes(mlpBatch)[7]);
        macs.put("mlpIntegerForward", mlpMacs);
        cases.put("mlpSimulatedForward", () -> sim.forward(mlpBatch).getFlat(7));
        macs.put("mlpSimulatedForward", mlpMacs);
        cases.put("cnnFloatForward", () -> cnn.forward(cnnBatch).getFlat(7));
        macs.put("cnnFloatForward", macs(cnn, cnnBatch));
    }

    @Override
    public DoubleSupplier apply(String name) {
        DoubleSupplier s = cases.get(name);
        if (s == null) {
            throw new IllegalArgumentException("no case '" + name + "' among " + cases.keySet());
        }
        return s;
    }

    /** The cases' names with their multiply-adds per call. */
    public Map<String, Long> macs() {
        return macs;
    }
}
