package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.math.BigDecimal;
import java.math.BigInteger;
import java.math.RoundingMode;
import java.util.SplittableRandom;
import org.junit.jupiter.api.Test;

class FixedPointTest {
    @Test
    void saturatingRoundingDoublingHighMulWorkedValues() {
        // Source: check-values.md §9 (integer-only arithmetic, Jacob et al. CVPR 2018; rounding computed).
        assertEquals(3, FixedPoint.saturatingRoundingDoublingHighMul(5, 1 << 30));
        assertEquals(-2, FixedPoint.saturatingRoundingDoublingHighMul(-5, 1 << 30));
        assertEquals(Integer.MAX_VALUE,
                FixedPoint.saturatingRoundingDoublingHighMul(Integer.MIN_VALUE, Integer.MIN_VALUE));
        assertEquals(Integer.MIN_VALUE + 1,
                FixedPoint.saturatingRoundingDoublingHighMul(Integer.MIN_VALUE, Integer.MAX_VALUE));
    }

    @Test
    void roundingDivideByPowerOfTwoWorkedValues() {
        // Source: check-values.md §9: ties away from zero.
        assertEquals(3, FixedPoint.roundingDivideByPowerOfTwo(5, 1));
        assertEquals(-3, FixedPoint.roundingDivideByPowerOfTwo(-5, 1));
        assertEquals(-2, FixedPoint.roundingDivideByPowerOfTwo(-6, 2));
        assertEquals(2, FixedPoint.roundingDivideByPowerOfTwo(6, 2));
    }

    @Test
    void decomposesWorkedMultipliers() {
        // Source: check-values.md §9 worked examples: M = 0.3 -> n = 1, M0 = 1288490189; M = 0.0123 -> n = 6,
        // M0 = 1690499128; accumulators 1000 -> 300, 12345 -> 3704.
        FixedPoint p = FixedPoint.of(0.3);
        assertEquals(1, p.shift());
        assertEquals(1288490189, p.multiplier());
        assertEquals(300, p.apply(1000));
        assertEquals(3704, p.apply(12345));
        FixedPoint q = FixedPoint.of(0.0123);
        assertEquals(6, q.shift());
        assertEquals(1690499128, q.multiplier());
    }

    @Test
    void matchesBigDecimalReferenceOnAMillionRandomCases() {
        // Reference: the same two roundings done exactly with BigDecimal (first step: floor(a*b/2^31 + 1/2) for
        // non-negative products, truncation of (ab + 1 - 2^30)/2^31 for negative ones; second step: half away from
        // zero), and the exact real product, which the result must be within 1 of.
        SplittableRandom r = new SplittableRandom(42);
        BigDecimal two31 = new BigDecimal(BigInteger.ONE.shiftLeft(31));
        for (int i = 0; i < 1_000_000; i++) {
            double m = Math.exp(r.nextDouble(Math.log(1e-6), Math.log(0.999)));
            int acc = r.nextInt(5) == 0 ? r.nextInt() : r.nextInt(-1 << 20, 1 << 20);
            FixedPoint p = FixedPoint.of(m);
            BigInteger ab = BigInteger.valueOf(acc).multiply(BigInteger.valueOf(p.multiplier()));
            BigInteger nudged = ab.signum() >= 0 ? ab.add(BigInteger.ONE.shiftLeft(30))
                    : ab.add(BigInteger.ONE).subtract(BigInteger.ONE.shiftLeft(30));
            BigInteger first = new BigDecimal(nudged).divide(two31, 0, RoundingMode.DOWN).toBigInteger();
            BigDecimal second = new BigDecimal(first).divide(new BigDecimal(BigInteger.ONE.shiftLeft(p.shift())), 0,
                    RoundingMode.HALF_UP);
            int got = p.apply(acc);
            assertEquals(second.intValueExact(), got, "acc " + acc + " M " + m);
            double exact = acc * m;
            assertTrue(Math.abs(got - exact) <= 1.0 + 1e-9 * Math.abs(exact), "acc " + acc + " M " + m);
        }
    }

    @Test
    void singleRoundingMatchesABigDecimalReferenceOnAMillionCases() {
        // Source: BigDecimal arithmetic: acc * M0q / 2^(31 + n) rounded half away from zero, saturated to int32.
        java.util.Random r = dev.rungbook.testing.Fixtures.random(91);
        int differFromDouble = 0;
        for (int i = 0; i < 1_000_000; i++) {
            double m = Math.exp(r.nextDouble() * (Math.log(64) - Math.log(1e-6)) + Math.log(1e-6));
            int acc = r.nextInt(5) == 0 ? r.nextInt() : r.nextInt(1 << 21) - (1 << 20);
            FixedPoint p = FixedPoint.of(m);
            BigDecimal exact = new BigDecimal(BigInteger.valueOf(acc).multiply(BigInteger.valueOf(p.multiplier())))
                    .divide(new BigDecimal(BigInteger.ONE.shiftLeft(31 + p.shift())));
            BigInteger want = exact.setScale(0, RoundingMode.HALF_UP).toBigInteger()
                    .max(BigInteger.valueOf(Integer.MIN_VALUE)).min(BigInteger.valueOf(Integer.MAX_VALUE));
            assertEquals(want.intValueExact(), p.applySingleRounding(acc), "acc " + acc + " M " + m);
            double d = acc * m;
            if (Math.abs(d) < 1e9 && p.applySingleRounding(acc) != Math.round(d)
                    && Math.abs(d - Math.floor(d) - 0.5) > Math.abs(d) * 0x1p-30 + 1e-9) {
                differFromDouble++;
            }
        }
        // Away from ties (beyond the Q31 error of M0, relative 2^-31), one rounding of the product is that of acc * M.
        assertEquals(0, differFromDouble);
    }

    @Test
    void multipliersOfOneOrMoreShiftLeft() {
        FixedPoint p = FixedPoint.of(3.0);
        assertEquals(-2, p.shift());
        assertEquals(300, p.apply(100));
        assertEquals(Integer.MAX_VALUE, p.apply(Integer.MAX_VALUE));
    }

    @Test
    void tinyMultipliersGiveZero() {
        FixedPoint p = FixedPoint.of(1e-12);
        assertTrue(p.shift() > 31);
        assertEquals(0, p.apply(Integer.MAX_VALUE));
        assertEquals(0, p.apply(Integer.MIN_VALUE));
    }

    @Test
    void rejectsImpossibleMultipliers() {
        assertThrows(IllegalArgumentException.class, () -> FixedPoint.of(0));
        assertThrows(IllegalArgumentException.class, () -> FixedPoint.of(-0.5));
        assertThrows(IllegalArgumentException.class, () -> FixedPoint.of(Double.NaN));
        assertThrows(IllegalArgumentException.class, () -> FixedPoint.of(1e-30));
    }
}
