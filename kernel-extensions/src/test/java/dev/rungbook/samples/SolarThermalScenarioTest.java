package dev.rungbook.samples;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.nn.Dataset;
import dev.rungbook.nn.Network;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.Locale;
import java.util.Map;
import org.junit.jupiter.api.Test;

class SolarThermalScenarioTest {
    private static final Path SAMPLES = Path.of("..", "sample-tensors");

    @Test
    void isSeededAndBalanced() {
        Dataset a = SolarThermalScenario.generate(1, 800);
        assertEquals(a, SolarThermalScenario.generate(1, 800));
        assertTrue(!a.equals(SolarThermalScenario.generate(2, 800)));
        assertArrayEquals(new int[] {800, 1, 16, 16}, a.inputs().shape());
        int[] count = new int[4];
        for (int y : a.labels()) {
            count[y]++;
        }
        for (int c : count) {
            // uniform classes: 200 expected, binomial standard deviation about 12
            assertTrue(c > 150 && c < 250, java.util.Arrays.toString(count));
        }
    }

    @Test
    void faultsAreWarmerThanTheirTile() {
        // Physical sanity of the simulator: the hottest pixel stands further above the tile median for hot spots
        // (6 to 25 K peaks) than for normal tiles (only noise, cell offsets and the occasional glint).
        Dataset d = SolarThermalScenario.generate(3, 1200);
        float[] x = d.inputs().toFloatArray();
        int[] y = d.labels();
        double[] sum = new double[4];
        int[] n = new int[4];
        for (int s = 0; s < y.length; s++) {
            float[] tile = java.util.Arrays.copyOfRange(x, s * 256, (s + 1) * 256);
            float[] sorted = tile.clone();
            java.util.Arrays.sort(sorted);
            sum[y[s]] += 10 * (sorted[255] - sorted[128]);
            n[y[s]]++;
        }
        double normal = sum[0] / n[0];
        double hotSpot = sum[1] / n[1];
        assertTrue(hotSpot > normal + 5, "hot spot peak " + hotSpot + " K vs normal " + normal + " K");
    }

    @Test
    void shippedConvNetReachesItsRecordedAccuracy() {
        Map<String, Tensor> t = new LinkedHashMap<>();
        Map<String, String> meta;
        try (Checkpoint c = Checkpoint.open(SAMPLES.resolve("thermal-cnn.f32.safetensors"))) {
            c.tensors().forEach((k, v) -> t.put(k, Tensor.of(v.toFloatArray(), v.shape()).withName(k)));
            meta = c.metadata();
        }
        Network net = SampleGenerator.thermalNet(t);
        // The file names its own architecture, and it is the layout the generator trains.
        assertEquals(SampleGenerator.THERMAL_ARCHITECTURE, meta.get("architecture"));
        assertTrue(meta.get("architecture").startsWith(SampleGenerator.initialThermalNet(1).architecture() + ";"));
        Dataset test = Dataset.load(SAMPLES.resolve("thermal-test.npz"));
        assertEquals(meta.get("test_accuracy"), String.format(Locale.ROOT, "%.4f", net.accuracy(test)));
        // folding the batch norms keeps the predictions (up to float rounding at near ties)
        int[] a = net.predict(test.inputs());
        int[] b = net.foldBatchNorm().predict(test.inputs());
        int same = 0;
        for (int i = 0; i < a.length; i++) {
            same += a[i] == b[i] ? 1 : 0;
        }
        assertTrue(same >= a.length - 2, same + " of " + a.length);
    }
}
