package dev.rungbook.tensor;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.util.ArrayList;
import java.util.List;
import java.util.Random;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.params.ParameterizedTest;
import org.junit.jupiter.params.provider.EnumSource;

class FloatFormatTest {

    @Test
    void ofp8E4M3Values() {
        // Source: OCP 8-bit Floating Point Specification (OFP8) rev 1.0, 2023, table of E4M3 values (check-values.md §3).
        FloatFormat f = FloatFormat.E4M3;
        assertEquals(7, f.bias());
        assertEquals(448f, f.max());
        assertEquals(0x7E, f.encode(448f)); // S.1111.110
        assertEquals((float) Math.scalb(1.0, -6), f.minNormal());
        assertEquals((float) Math.scalb(1.0, -9), f.minSubnormal());
        assertEquals(0.013671875f, f.decode(0x07)); // max subnormal
        assertTrue(Float.isNaN(f.decode(0x7F)));
        assertTrue(Float.isNaN(f.decode(0xFF)));
        assertEquals(false, f.hasInfinity());
        // Derived tie points (check-values.md §3 [computed]): |x| <= 464 rounds to 448, above overflows to NaN.
        assertEquals(448f, f.round(464f));
        assertEquals(-448f, f.round(-464f));
        assertTrue(Float.isNaN(f.round(464.01f)));
        assertTrue(Float.isNaN(f.round(Float.POSITIVE_INFINITY)));
        assertEquals(448f, f.roundSaturating(1e9f));
        assertEquals(-448f, f.roundSaturating(Float.NEGATIVE_INFINITY));
    }

    @Test
    void ofp8E5M2Values() {
        // Source: OFP8 rev 1.0 (check-values.md §3): bias 15, max 57344, Inf S.11111.00, NaN S.11111.{01,10,11}.
        FloatFormat f = FloatFormat.E5M2;
        assertEquals(15, f.bias());
        assertEquals(57344f, f.max());
        assertEquals((float) Math.scalb(1.0, -14), f.minNormal());
        assertEquals((float) Math.scalb(1.0, -16), f.minSubnormal());
        assertEquals(Float.POSITIVE_INFINITY, f.decode(0x7C));
        assertEquals(Float.NEGATIVE_INFINITY, f.decode(0xFC));
        for (int nan : new int[] {0x7D, 0x7E, 0x7F, 0xFD, 0xFE, 0xFF}) {
            assertTrue(Float.isNaN(f.decode(nan)), Integer.toHexString(nan));
        }
        // check-values.md §3 [computed]: |x| >= 61440 overflows.
        assertEquals(57344f, f.round(61439f));
        assertEquals(Float.POSITIVE_INFINITY, f.round(61440f));
        assertEquals(57344f, f.roundSaturating(61440f));
    }

    @Test
    void mxElementFormats() {
        // Source: OCP Microscaling Formats (MX) v1.0, 2023, element format tables (check-values.md §4).
        assertEquals(28f, FloatFormat.E3M2.max());
        assertEquals(0.25f, FloatFormat.E3M2.minNormal());
        assertEquals(0.0625f, FloatFormat.E3M2.minSubnormal());
        assertEquals(7.5f, FloatFormat.E2M3.max());
        assertEquals(1f, FloatFormat.E2M3.minNormal());
        assertEquals(0.125f, FloatFormat.E2M3.minSubnormal());
        List<Float> fp4 = new ArrayList<>();
        for (int c = 0; c < 8; c++) {
            fp4.add(FloatFormat.E2M1.decode(c));
        }
        assertEquals(List.of(0f, 0.5f, 1f, 1.5f, 2f, 3f, 4f, 6f), fp4);
        // MX formats have no Inf/NaN: overflow saturates (worked example §4: 7 -> 6).
        assertEquals(6f, FloatFormat.E2M1.round(7f));
        assertEquals(-6f, FloatFormat.E2M1.round(Float.NEGATIVE_INFINITY));
        assertEquals(4f, FloatFormat.E2M1.round(4.8f));
        assertThrows(IllegalArgumentException.class, () -> FloatFormat.E2M1.encode(Float.NaN));
        // MX emax values per element type (§4): E3M2 4, E2M3 2, E2M1 2, E4M3 8, E5M2 15.
        assertEquals(4, FloatFormat.E3M2.maxExponent());
        assertEquals(2, FloatFormat.E2M3.maxExponent());
        assertEquals(2, FloatFormat.E2M1.maxExponent());
        assertEquals(8, FloatFormat.E4M3.maxExponent());
        assertEquals(15, FloatFormat.E5M2.maxExponent());
    }

    @Test
    void binary16Values() {
        // Source: IEEE 754 binary16; values computed with NumPy float16 (check-values.md §5).
        FloatFormat f = FloatFormat.F16;
        assertEquals(65504f, f.max());
        assertEquals((float) Math.scalb(1.0, -14), f.minNormal());
        assertEquals((float) Math.scalb(1.0, -24), f.minSubnormal());
        assertEquals(65504f, f.round(65519f));
        assertEquals(Float.POSITIVE_INFINITY, f.round(65520f));
        assertEquals(0f, f.round((float) Math.scalb(1.0, -25)));
        assertEquals(0x3C00, f.encode(1f));
        assertEquals(0x7E00, f.encode(Float.NaN));
    }

    @Test
    void bfloat16Values() {
        // Source: bfloat16 definition; bit patterns computed with NumPy (check-values.md §5).
        FloatFormat f = FloatFormat.BF16;
        assertEquals(3.3895313892515355e38, f.max(), 0.0);
        assertEquals((float) Math.scalb(1.0, -126), f.minNormal());
        assertEquals((float) Math.scalb(1.0, -133), f.minSubnormal());
        assertEquals(0x3F80, f.encode(Float.intBitsToFloat(0x3F808000)));
        assertEquals(0x3F82, f.encode(Float.intBitsToFloat(0x3F818000)));
        assertEquals(0x4049, f.encode((float) Math.PI));
        assertEquals(0x7F80, f.encode(Float.MAX_VALUE));
    }

    @ParameterizedTest
    @EnumSource(FloatFormat.class)
    void everyCodeDecodesAndReencodesToItself(FloatFormat f) {
        // Source: exhaustive over all 2^bitWidth codes; NaN codes must decode to NaN.
        int n = 1 << f.bitWidth();
        int nans = 0;
        for (int c = 0; c < n; c++) {
            float v = f.decode(c);
            if (Float.isNaN(v)) {
                nans++;
                assertTrue(Float.isNaN(f.decode(f.encode(v))));
                continue;
            }
            final int code = c;
            assertEquals(c, f.encode(v), () -> f + " code 0x" + Integer.toHexString(code) + " value " + v);
            assertEquals(Float.floatToRawIntBits(v), Float.floatToRawIntBits(f.round(v)));
        }
        int expectedNans;
        switch (f) {
            case E4M3:
                expectedNans = 2;
                break;
            case E3M2:
            case E2M3:
            case E2M1:
                expectedNans = 0;
                break;
            default:
                expectedNans = 2 * ((1 << f.mantissaBits()) - 1);
        }
        assertEquals(expectedNans, nans);
    }

    @ParameterizedTest
    @EnumSource(value = FloatFormat.class, names = {"E4M3", "E5M2", "E3M2", "E2M3", "E2M1"})
    void roundIsNearestWithTiesToEvenAgainstBruteForce(FloatFormat f) {
        // Reference: brute-force search over every finite code, ties broken towards the even code.
        List<float[]> finite = new ArrayList<>();
        for (int c = 0; c < (1 << f.bitWidth()); c++) {
            float v = f.decode(c);
            if (!Float.isNaN(v) && !Float.isInfinite(v)) {
                finite.add(new float[] {v, c});
            }
        }
        Random r = new Random(7);
        for (int i = 0; i < 20000; i++) {
            float x = (float) (r.nextGaussian() * f.max() / 3);
            if (i % 4 == 0) {
                x = f.decode(r.nextInt(1 << f.bitWidth())) + f.decode(r.nextInt(1 << f.bitWidth())); // exact midpoints
            }
            if (Float.isNaN(x) || Math.abs(x) > f.max()) {
                continue;
            }
            float best = Float.NaN;
            double bestDist = Double.POSITIVE_INFINITY;
            int bestCode = -1;
            for (float[] e : finite) {
                double d = Math.abs((double) e[0] - x);
                int code = (int) e[1];
                boolean tieEven = d == bestDist && (code & 1) == 0;
                if (d < bestDist || tieEven) {
                    bestDist = d;
                    best = e[0];
                    bestCode = code;
                }
            }
            final float xx = x;
            final int bc = bestCode;
            assertEquals(Math.abs(best), Math.abs(f.round(x)), () -> f + " x=" + xx + " code " + bc);
        }
    }

    @Test
    void bfloat16FastPathMatchesGenericRounding() {
        // Reference: round-to-nearest-even computed with exact double arithmetic on the bfloat16 grid.
        Random r = new Random(11);
        for (int i = 0; i < 200000; i++) {
            float x = Float.intBitsToFloat(r.nextInt());
            if (Float.isNaN(x) || Float.isInfinite(x)) {
                continue;
            }
            double a = Math.abs((double) x);
            float expected;
            if (a == 0) {
                expected = x;
            } else {
                int e = Math.max(Math.getExponent(a), -126);
                double q = Math.scalb(Math.rint(Math.scalb(a, 7 - e)), e - 7);
                expected = q > FloatFormat.BF16.max() ? Float.POSITIVE_INFINITY : (float) q;
                expected = Math.copySign(expected, x);
            }
            assertEquals(Float.floatToRawIntBits(expected), Float.floatToRawIntBits(FloatFormat.BF16.round(x)),
                    "x bits " + Integer.toHexString(Float.floatToRawIntBits(x)));
        }
    }

    @Test
    void rejectsCodesWiderThanTheFormat() {
        assertThrows(IllegalArgumentException.class, () -> FloatFormat.E4M3.decode(0x100));
    }
}
