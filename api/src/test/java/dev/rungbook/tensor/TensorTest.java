package dev.rungbook.tensor;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertFalse;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.List;
import java.util.concurrent.atomic.AtomicInteger;
import org.junit.jupiter.api.Test;

class TensorTest {
    // Source for expected views: row-major (C order) indexing, worked by hand on a 2x3x4 tensor holding 0..23.
    private static Tensor iota234() {
        return Tensor.generate(i -> i, 2, 3, 4);
    }

    @Test
    void copiesInputAndReportsShape() {
        float[] d = {1, 2, 3, 4, 5, 6};
        Tensor t = Tensor.of(d, 2, 3);
        d[0] = 99;
        assertEquals(1f, t.get(0, 0));
        assertEquals(6f, t.get(1, 2));
        assertArrayEquals(new int[] {2, 3}, t.shape());
        assertEquals(6, t.size());
        assertEquals(DType.F32, t.dtype());
    }

    @Test
    void channelOfMiddleAxisIsStrided() {
        // channel 1 of axis 1: elements [o][1][i] = o*12 + 4 + i
        TensorView v = iota234().channel(1, 1);
        assertArrayEquals(new float[] {4, 5, 6, 7, 16, 17, 18, 19}, v.toFloatArray());
        assertFalse(v.isContiguous());
        assertEquals(8, v.size());
    }

    @Test
    void channelOfFirstAxisIsContiguous() {
        TensorView v = iota234().channel(0, 1);
        assertTrue(v.isContiguous());
        assertEquals(12, v.size());
        assertEquals(12f, v.get(0));
        assertEquals(23f, v.get(11));
    }

    @Test
    void channelOfLastAxis() {
        TensorView v = iota234().channel(2, 3);
        assertArrayEquals(new float[] {3, 7, 11, 15, 19, 23}, v.toFloatArray());
    }

    @Test
    void groupsAlongLastAxis() {
        List<TensorView> g = iota234().groups(2, 2);
        assertEquals(12, g.size());
        assertArrayEquals(new float[] {0, 1}, g.get(0).toFloatArray());
        assertArrayEquals(new float[] {2, 3}, g.get(1).toFloatArray());
        assertArrayEquals(new float[] {22, 23}, g.get(11).toFloatArray());
    }

    @Test
    void groupsAlongFirstAxisOfMatrix() {
        // 4x2 matrix 0..7, groups of 2 along axis 0: (0,2), (1,3), (4,6), (5,7)
        List<TensorView> g = Tensor.generate(i -> i, 4, 2).groups(0, 2);
        assertEquals(4, g.size());
        assertArrayEquals(new float[] {0, 2}, g.get(0).toFloatArray());
        assertArrayEquals(new float[] {1, 3}, g.get(1).toFloatArray());
        assertArrayEquals(new float[] {4, 6}, g.get(2).toFloatArray());
        assertArrayEquals(new float[] {5, 7}, g.get(3).toFloatArray());
    }

    @Test
    void rejectsGroupSizeThatDoesNotDivide() {
        Tensor t = Tensor.of(new float[12], 3, 4).withName("fc1.weight");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class, () -> t.groups(1, 3));
        assertEquals("tensor 'fc1.weight': group size 3 does not divide dimension 1 of shape [3, 4]",
                e.getMessage());
    }

    @Test
    void rejectsShapesOverTwoToThe31() {
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Tensor.lazy("big", DType.BF16, new int[] {65536, 65536}, () -> null));
        assertTrue(e.getMessage().contains("big"), e.getMessage());
        assertTrue(e.getMessage().contains("[65536, 65536]"), e.getMessage());
    }

    @Test
    void rejectsNegativeDimensionAndSizeMismatch() {
        assertThrows(IllegalArgumentException.class, () -> Tensor.of(new float[0], -1));
        assertThrows(IllegalArgumentException.class, () -> Tensor.of(new float[5], 2, 3));
    }

    @Test
    void lazyTensorLoadsOnceOnFirstUse() {
        AtomicInteger calls = new AtomicInteger();
        Tensor t = Tensor.lazy("w", DType.F16, new int[] {2, 2}, () -> {
            calls.incrementAndGet();
            return new float[] {1, 2, 3, 4};
        });
        assertFalse(t.isLoaded());
        assertEquals(0, calls.get());
        assertEquals(4f, t.get(1, 1));
        assertEquals(3f, t.getFlat(2));
        assertTrue(t.isLoaded());
        assertEquals(1, calls.get());
        assertEquals(DType.F16, t.dtype());
    }

    @Test
    void reshapeKeepsValuesAndChecksSize() {
        Tensor t = iota234().reshape(6, 4);
        assertEquals(23f, t.get(5, 3));
        assertThrows(IllegalArgumentException.class, () -> t.reshape(5, 5));
    }

    @Test
    void scalarAndEmptyShapes() {
        Tensor s = Tensor.of(new float[] {7}, new int[0]);
        assertEquals(1, s.size());
        assertEquals(7f, s.get());
        Tensor e = Tensor.of(new float[0], 0, 5);
        assertEquals(0, e.size());
        assertEquals(0, e.channels(1).get(2).size());
        assertEquals(0, e.groups(1, 5).size());
    }
}
