package dev.rungbook.internal;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import org.junit.jupiter.api.Test;

class MxScaleTest {
    private static final int E2M1_EMAX = 2;

    @Test
    void workedExamplesFromSpec() {
        // Source: OCP Microscaling Formats v1.0 (2023), shared-scale rule; worked examples per check-values.md §4
        assertEquals(0, MxScale.sharedExponent(7f, E2M1_EMAX)); // floor(log2 7) = 2, minus emax 2
        assertEquals(1f, MxScale.scale(7f, E2M1_EMAX));
        assertEquals(-4, MxScale.sharedExponent(0.3f, E2M1_EMAX)); // floor(log2 0.3) = -2, minus 2
        assertEquals(0x1p-4f, MxScale.scale(0.3f, E2M1_EMAX));
        // 0.3 / 2^-4 = 4.8 lies within the E2M1 range (max 6), as the spec intends
        assertTrue(0.3f / MxScale.scale(0.3f, E2M1_EMAX) <= 6f);
        // E4M3 (emax 8): block max 448 -> 2^(8 - 8) = 1
        assertEquals(0, MxScale.sharedExponent(448f, 8));
        assertEquals(-8, MxScale.sharedExponent(1f, 8));
    }

    @Test
    void exactFloorLog2AtPowersOfTwoAndSubnormals() {
        assertEquals(3, MxScale.sharedExponent(8f, 0));
        assertEquals(2, MxScale.sharedExponent(Math.nextDown(8f), 0));
        assertEquals(-127, MxScale.sharedExponent(Float.MIN_VALUE, 0)); // clamped to the E8M0 range
        assertEquals(127, MxScale.sharedExponent(Float.MAX_VALUE, 0));
        assertEquals(125, MxScale.sharedExponent(Float.MAX_VALUE, 2));
        assertEquals(-127, MxScale.sharedExponent(0f, E2M1_EMAX));
        assertThrows(IllegalArgumentException.class, () -> MxScale.sharedExponent(Float.NaN, 2));
        assertThrows(IllegalArgumentException.class, () -> MxScale.sharedExponent(-1f, 2));
        assertThrows(IllegalArgumentException.class, () -> MxScale.sharedExponent(Float.POSITIVE_INFINITY, 2));
    }

    @Test
    void e8m0CodesFollowSpec() {
        // Source: OCP MX v1.0, E8M0: bias 127, codes 0..254 = 2^-127..2^127, 0xFF = NaN (check-values.md §4)
        assertEquals(127, MxScale.encodeE8M0(0));
        assertEquals(0, MxScale.encodeE8M0(-127));
        assertEquals(254, MxScale.encodeE8M0(127));
        assertEquals(1f, MxScale.decodeE8M0(127));
        assertEquals(0x1p-127f, MxScale.decodeE8M0(0));
        assertTrue(MxScale.decodeE8M0(0) > 0);
        assertEquals(0x1p127f, MxScale.decodeE8M0(254));
        assertTrue(Float.isNaN(MxScale.decodeE8M0(0xFF)));
        for (int e = -127; e <= 127; e++) {
            assertEquals((float) Math.pow(2, e), MxScale.decodeE8M0(MxScale.encodeE8M0(e)));
        }
        assertThrows(IllegalArgumentException.class, () -> MxScale.encodeE8M0(128));
        assertThrows(IllegalArgumentException.class, () -> MxScale.decodeE8M0(256));
    }
}
