package dev.rungbook.bench;

import jdk.incubator.vector.FloatVector;
import jdk.incubator.vector.IntVector;
import jdk.incubator.vector.VectorOperators;
import jdk.incubator.vector.VectorSpecies;

/**
 * The machine's multiply-add throughput as Java code reaches it with the incubating Vector API: twelve float
 * (eight int) accumulators of the preferred vector width held in registers, each updated by one multiply-add per
 * step, so that nothing but the arithmetic limits the loop (no loads or stores, more independent chains than the
 * latency of a fused multiply-add or an int multiply needs). This is the ceiling the forward kernels are measured
 * against. Needs {@code --add-modules jdk.incubator.vector}; only {@link ForwardCpuTime} and {@link ForwardBench}
 * refer to it, and only when the module is present.
 */
final class VectorPeaks {
    private static final VectorSpecies<Float> F = FloatVector.SPECIES_PREFERRED;
    private static final VectorSpecies<Integer> I = IntVector.SPECIES_PREFERRED;
    /** Steps per call. */
    static final int STEPS = 1 << 18;

    private VectorPeaks() {
    }

    /** Lanes of the preferred vectors. */
    static int lanes() {
        return F.length();
    }

    /** Float multiply-adds per call: {@code STEPS * 12 * lanes}. */
    static long floatMacs() {
        return (long) STEPS * 12 * F.length();
    }

    /** Int32 multiply-adds per call: {@code STEPS * 8 * lanes}. */
    static long intMacs() {
        return (long) STEPS * 8 * I.length();
    }

    /** Twelve independent chains {@code c = fma(w, a, c)}. */
    static float floatFma(float[] x, float a) {
        FloatVector va = FloatVector.broadcast(F, a);
        FloatVector x0 = FloatVector.fromArray(F, x, 0);
        FloatVector x1 = FloatVector.fromArray(F, x, F.length());
        FloatVector c0 = x0;
        FloatVector c1 = x1;
        FloatVector c2 = x0.neg();
        FloatVector c3 = x1.neg();
        FloatVector c4 = x0.mul(2f);
        FloatVector c5 = x1.mul(2f);
        FloatVector c6 = x0.mul(3f);
        FloatVector c7 = x1.mul(3f);
        FloatVector c8 = x0.mul(.5f);
        FloatVector c9 = x1.mul(.5f);
        FloatVector c10 = x0.mul(-.5f);
        FloatVector c11 = x1.mul(-.5f);
        for (int r = 0; r < STEPS; r++) {
            c0 = x0.fma(va, c0);
            c1 = x1.fma(va, c1);
            c2 = x0.fma(va, c2);
            c3 = x1.fma(va, c3);
            c4 = x0.fma(va, c4);
            c5 = x1.fma(va, c5);
            c6 = x0.fma(va, c6);
            c7 = x1.fma(va, c7);
            c8 = x0.fma(va, c8);
            c9 = x1.fma(va, c9);
            c10 = x0.fma(va, c10);
            c11 = x1.fma(va, c11);
        }
        return c0.add(c1).add(c2).add(c3).add(c4).add(c5).add(c6).add(c7).add(c8).add(c9).add(c10).add(c11)
                .reduceLanes(VectorOperators.ADD);
    }

    /**
     * Eight independent chains {@code c = c + x * v} in int32, {@code v} stepping by one each time (so that the
     * products cannot be hoisted out of the loop; the step is one extra add per eight multiply-adds, not counted).
     */
    static int intMulAdd(int[] x, int a) {
        IntVector va = IntVector.broadcast(I, a);
        IntVector one = IntVector.broadcast(I, 1);
        IntVector x0 = IntVector.fromArray(I, x, 0);
        IntVector x1 = IntVector.fromArray(I, x, I.length());
        IntVector c0 = x0;
        IntVector c1 = x1;
        IntVector c2 = x0.neg();
        IntVector c3 = x1.neg();
        IntVector c4 = x0.mul(2);
        IntVector c5 = x1.mul(2);
        IntVector c6 = x0.mul(3);
        IntVector c7 = x1.mul(3);
        for (int r = 0; r < STEPS; r++) {
            va = va.add(one);
            c0 = c0.add(x0.mul(va));
            c1 = c1.add(x1.mul(va));
            c2 = c2.add(x0.mul(va));
            c3 = c3.add(x1.mul(va));
            c4 = c4.add(x0.mul(va));
            c5 = c5.add(x1.mul(va));
            c6 = c6.add(x0.mul(va));
            c7 = c7.add(x1.mul(va));
        }
        return c0.add(c1).add(c2).add(c3).add(c4).add(c5).add(c6).add(c7).reduceLanes(VectorOperators.ADD);
    }
}
