package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;

import dev.rungbook.tensor.Tensor;
import org.junit.jupiter.api.Test;
import tech.tablesaw.api.Table;

class EvaluationTest {
    /** Logits whose largest entry is at {@code predicted[s]} (value 2, the others 0). */
    private static Tensor logits(int[] predicted, int classes) {
        float[] z = new float[predicted.length * classes];
        for (int s = 0; s < predicted.length; s++) {
            z[s * classes + predicted[s]] = 2f;
        }
        return Tensor.of(z, predicted.length, classes);
    }

    @Test
    void confusionOfAHandWorkedExample() {
        // Source: hand-worked example. Labels 0 0 1 1 2 2 2, predictions 0 1 1 1 2 0 2:
        // row 0: [1 1 0], row 1: [0 2 0], row 2: [1 0 2]; recall 1/2, 2/2, 2/3; precision 1/2, 2/3, 2/2;
        // accuracy 5/7.
        int[] labels = {0, 0, 1, 1, 2, 2, 2};
        int[] predicted = {0, 1, 1, 1, 2, 0, 2};
        Evaluation e = Evaluation.ofLogits(logits(predicted, 3), labels);
        assertArrayEquals(new int[][] {{1, 1, 0}, {0, 2, 0}, {1, 0, 2}}, e.matrix());
        assertEquals(5.0 / 7, e.accuracy(), 1e-15);
        Table c = e.confusion();
        assertEquals(java.util.List.of("class", "predicted_0", "predicted_1", "predicted_2", "samples", "recall"),
                c.columnNames());
        assertEquals(1, c.intColumn("predicted_0").get(2));
        assertEquals(3, c.intColumn("samples").get(2));
        assertEquals(2.0 / 3, c.doubleColumn("recall").get(2), 1e-15);
        Table p = e.perClass();
        assertEquals(2.0 / 3, p.doubleColumn("precision").get(1), 1e-15);
        assertEquals(0.5, p.doubleColumn("precision").get(0), 1e-15);
        // f1 of class 1: 2 * (1 * 2/3) / (1 + 2/3) = 0.8
        assertEquals(0.8, p.doubleColumn("f1").get(1), 1e-15);
        assertEquals(2, p.intColumn("predicted").get(0));
    }

    @Test
    void lossIsTheMeanCrossEntropy() {
        // Source: closed form. Logits (2, 0, 0): softmax of the first entry is e^2 / (e^2 + 2), so the loss with
        // label 0 is ln(1 + 2 e^-2) and with label 1 it is 2 + ln(1 + 2 e^-2).
        Evaluation e = Evaluation.ofLogits(logits(new int[] {0, 0}, 3), new int[] {0, 1});
        double l0 = Math.log(1 + 2 * Math.exp(-2));
        assertEquals((l0 + 2 + l0) / 2, e.loss(), 1e-6);
    }

    @Test
    void networkEvaluationMatchesItsAccuracy() {
        Network net = Trainer.initialMlp(71, 6, 10, 4);
        Tensor x = EqualizationTest.inputs(72, 200, 6);
        int[] labels = new int[200];
        for (int i = 0; i < labels.length; i++) {
            labels[i] = i % 4;
        }
        Dataset d = new Dataset(x, labels);
        Evaluation e = net.evaluate(d);
        assertEquals(net.accuracy(d), e.accuracy(), 0);
        assertArrayEquals(net.predict(x), e.predictions());
        int total = 0;
        for (int[] row : e.matrix()) {
            for (int v : row) {
                total += v;
            }
        }
        assertEquals(200, total);
        SimulatedNetwork sim = NetworkQuantization.of(net).calibrate(d);
        Table t = sim.compare(d);
        assertEquals(e.accuracy(), t.doubleColumn("accuracy").get(0), 0);
        assertEquals(sim.evaluate(d).accuracy(), t.doubleColumn("accuracy").get(1), 0);
        IllegalArgumentException err = assertThrows(IllegalArgumentException.class,
                () -> Evaluation.ofLogits(logits(new int[] {0}, 3), new int[] {5}));
        assertEquals("label 5 of sample 0 is not among the 3 classes the model outputs", err.getMessage());
    }
}
