package dev.rungbook.round;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.io.Checkpoint;
import dev.rungbook.tensor.Tensor;
import java.nio.file.Path;
import java.util.Map;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.api.io.TempDir;

class CalibrationTest {
    @TempDir
    Path dir;

    @Test
    void loadsInputsFromACheckpointFile() {
        float[] v = LearnedRoundingFixtures.gaussian(1, 6 * 4, 1.0);
        Path file = dir.resolve("acts.npz");
        Checkpoint.write(file, Map.of("fc1.inputs", Tensor.of(v, 6, 4)));
        Calibration cal = Calibration.load(file, "fc1.inputs");
        assertEquals(6, cal.samples());
        assertEquals(4, cal.features());
        assertArrayEquals(v, cal.inputs().toFloatArray());
        assertEquals(Calibration.Activation.IDENTITY, cal.activation());
        assertTrue(cal.bias().isEmpty());
    }

    @Test
    void refusesMismatchedShapesWithBothShapesInTheMessage() {
        Calibration cal = Calibration.of(Tensor.of(new float[512 * 70], 512, 70));
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> cal.checkWeight(Tensor.of(new float[64 * 72], 64, 72).withName("fc1.weight")));
        assertTrue(e.getMessage().contains("fc1.weight") && e.getMessage().contains("weight [64, 72] vs inputs [512, 70]"),
                e.getMessage());
        Calibration withBias = Calibration.of(Tensor.of(new float[10 * 3], 10, 3)).withBias(Tensor.of(new float[5], 5));
        e = assertThrows(IllegalArgumentException.class, () -> withBias.checkWeight(Tensor.of(new float[12], 4, 3)));
        assertTrue(e.getMessage().contains("weight [4, 3] vs bias [5]"), e.getMessage());
    }

    @Test
    void refusesInputsThatAreNotASampleMatrix() {
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Calibration.of(Tensor.of(new float[8], 2, 2, 2).withName("acts")));
        assertTrue(e.getMessage().contains("acts") && e.getMessage().contains("[2, 2, 2]"), e.getMessage());
        e = assertThrows(IllegalArgumentException.class,
                () -> Calibration.of(Tensor.of(new float[] {1, Float.NaN, 3, 4}, 2, 2)));
        assertTrue(e.getMessage().contains("NaN at [0, 1]"), e.getMessage());
        assertThrows(IllegalArgumentException.class, () -> Calibration.of(Tensor.of(new float[0], 0, 3)));
        Path missing = dir.resolve("none.npz");
        Checkpoint.write(missing, Map.of("a", Tensor.of(new float[] {1, 2}, 1, 2)));
        e = assertThrows(IllegalArgumentException.class, () -> Calibration.load(missing, "b"));
        assertTrue(e.getMessage().contains("no tensor 'b'"), e.getMessage());
    }

    @Test
    void biasAndActivationChangeTheAdaptiveObjective() {
        Calibration cal = Calibration.of(Tensor.of(new float[] {1, -2, 3, 4}, 2, 2));
        Calibration relu = cal.withBias(Tensor.of(new float[] {0.5f}, 1)).followedBy(Calibration.Activation.RELU);
        assertEquals("2 samples x 2 features, bias, ReLU", relu.label());
        assertEquals(0.0, Calibration.Activation.RELU.apply(-3), 0.0);
        assertEquals(-3.0, Calibration.Activation.IDENTITY.apply(-3), 0.0);
        assertTrue(!cal.equals(relu) && cal.equals(Calibration.of(Tensor.of(new float[] {1, -2, 3, 4}, 2, 2))));
    }
}
