package dev.rungbook.plan;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.Linear;
import dev.rungbook.nn.Network;
import dev.rungbook.nn.Relu;
import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.nio.file.Path;
import java.util.Random;

/** Seeded small networks and data for the planning tests, and the sample MLP. */
final class PlanFixtures {
    static final Path SAMPLE_MLP = Path.of("../sample-tensors/conveyor-mlp.f32.safetensors");
    static final Path SAMPLE_VALIDATION = Path.of("../sample-tensors/conveyor-validation.npz");

    private PlanFixtures() {
    }

    /** A seeded 8 -> 16 -> 12 -> 4 MLP with layers fc1, fc2, fc3. */
    static Network tinyMlp(long seed) {
        float[] w1 = scaled(Fixtures.gaussian(seed, 16 * 8), 0.5f);
        float[] w2 = scaled(Fixtures.gaussian(seed + 1, 12 * 16), 0.4f);
        float[] w3 = scaled(Fixtures.gaussian(seed + 2, 4 * 12), 0.5f);
        // One large weight in fc2 makes its per-tensor grid coarse, so layers differ in sensitivity.
        w2[5] = 6f;
        return Network.of(new Linear("fc1", Tensor.of(w1, 16, 8), Tensor.of(scaled(Fixtures.gaussian(seed + 3, 16),
                0.1f), 16)), new Relu("relu1"),
                new Linear("fc2", Tensor.of(w2, 12, 16), Tensor.of(new float[12], 12)), new Relu("relu2"),
                new Linear("fc3", Tensor.of(w3, 4, 12), Tensor.of(new float[4], 4)));
    }

    /** Seeded inputs [n, 8] labelled by the float network, with one label in ten replaced at random. */
    static Dataset tinyData(Network net, long seed, int n) {
        Tensor x = Tensor.of(Fixtures.gaussian(seed, n * 8), n, 8);
        int[] y = net.predict(x);
        Random r = Fixtures.random(seed + 7);
        for (int i = 0; i < n; i++) {
            if (r.nextInt(10) == 0) {
                y[i] = r.nextInt(4);
            }
        }
        return new Dataset(x, y);
    }

    /** The sample MLP (fc1, fc2, fc3) of sample-tensors. */
    static Network sampleMlp() {
        try (Checkpoint c = Checkpoint.open(SAMPLE_MLP)) {
            java.util.Map<String, Tensor> loaded = new java.util.LinkedHashMap<>();
            c.tensors().forEach((n, t) -> loaded.put(n, Tensor.of(t.toFloatArray(), t.shape()).withName(n)));
            return Network.mlp(loaded, "fc1", "fc2", "fc3");
        }
    }

    static Dataset sampleValidation() {
        return Dataset.load(SAMPLE_VALIDATION);
    }

    private static float[] scaled(float[] v, float s) {
        for (int i = 0; i < v.length; i++) {
            v[i] *= s;
        }
        return v;
    }
}
