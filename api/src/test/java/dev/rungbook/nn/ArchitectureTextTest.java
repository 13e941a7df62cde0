package dev.rungbook.nn;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.tensor.Tensor;
import dev.rungbook.testing.Fixtures;
import java.util.LinkedHashMap;
import java.util.Map;
import org.junit.jupiter.api.Test;

/** The architecture text: written by {@code Network.architecture()}, read by {@code Network.fromArchitecture}. */
class ArchitectureTextTest {
    private static Network convNet() {
        return Network.of(Conv2d.initial("conv1", 2, 4, 3, 1, 1, 7), BatchNorm.initial("bn1", 4), new Relu("r"),
                Pool2d.max("p", 2, 2), Conv2d.initial("conv2", 4, 3, 3, 2, 0, 8), new Relu6("r6"),
                Pool2d.average("q", 1, 1), new Identity("id"), new Flatten("f"), Linear.initial("fc", 3, 5, 9));
    }

    @Test
    void writtenTextReadsBackToTheSameFunction() {
        Network net = convNet();
        String text = net.architecture();
        assertEquals("conv1 [4,2,3,3] stride 1 padding 1 -> bn1 -> relu -> maxpool 2/2 -> conv2 [3,4,3,3] stride 2 "
                + "padding 0 -> relu6 -> avgpool 1/1 -> identity -> flatten -> fc [5,3]", text);
        Network back = Network.fromArchitecture(net.parameters(), text);
        assertEquals(text, back.architecture());
        Tensor x = Tensor.of(Fixtures.gaussian(3, 6 * 2 * 8 * 8), 6, 2, 8, 8);
        // Same layers with the same tensors in the same order: the forward pass is identical bit for bit.
        assertArrayEquals(net.forward(x).toFloatArray(), back.forward(x).toFloatArray());
    }

    @Test
    void readsTheMlpFormOfTheSampleMetadataAndChecksWidths() {
        Network mlp = Network.of(Linear.initial("fc1", 6, 8, 1), new Relu("relu1"), Linear.initial("fc2", 8, 3, 2));
        Network back = Network.fromArchitecture(mlp.parameters(), "fc1 -> relu -> fc2; widths [6, 8, 3]");
        Tensor x = Tensor.of(Fixtures.gaussian(4, 5 * 6), 5, 6);
        assertArrayEquals(mlp.forward(x).toFloatArray(), back.forward(x).toFloatArray());
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Network.fromArchitecture(mlp.parameters(), "fc1 -> relu -> fc2; widths [6, 9, 3]"));
        assertTrue(e.getMessage().contains("widths [6, 9, 3]") && e.getMessage().contains("[6, 8, 3]"),
                e.getMessage());
    }

    @Test
    void batchNormEpsFromTheNoteOrTheStep() {
        Map<String, Tensor> p = new LinkedHashMap<>(convNet().parameters());
        Network a = Network.fromArchitecture(p, "conv1 -> bn1 -> relu; batch norm eps 1e-3");
        assertEquals(1e-3, ((BatchNorm) a.layers().get(1)).eps());
        Network b = Network.fromArchitecture(p, "conv1 padding 1 -> bn1 eps 0.5");
        assertEquals(0.5, ((BatchNorm) b.layers().get(1)).eps());
        assertEquals(1, ((Conv2d) b.layers().get(0)).padding());
        assertEquals("conv1 [4,2,3,3] stride 1 padding 1 -> bn1 eps 0.5", b.architecture());
    }

    @Test
    void errorsNameTheStepAndTheToken() {
        Map<String, Tensor> p = convNet().parameters();
        assertMessage(p, "conv1 -> nope", "step 2 'nope'", "no tensor 'nope.weight'");
        assertMessage(p, "conv1 [4,2,5,5]", "step 1", "[4, 2, 5, 5]", "[4, 2, 3, 3]");
        assertMessage(p, "conv1 -> relu 3", "step 2 'relu 3'", "takes nothing");
        assertMessage(p, "conv1 -> maxpool two", "'two' is not a non-negative integer");
        assertMessage(p, "conv1 stride", "option 'stride' has no value");
        assertMessage(p, "fc eps 2", "option 'eps' does not apply to a linear layer");
        assertMessage(p, "conv1 ->", "step 2", "is empty");
        assertMessage(p, "conv1; dropout 0.5", "note 'dropout 0.5' is not understood");
        assertMessage(p, "conv1 -> fc", "conv1 gives 4 channels but fc takes 3");
        assertMessage(p, " ", "architecture text is empty");
        assertMessage(p, "conv1 -> 3x", "'3x' is neither a layer kind");
    }

    @Test
    void layersWithoutATextAreRefused() {
        Network odd = Network.of(new Layer() {
            @Override
            public String name() {
                return "custom";
            }

            @Override
            public Tensor forward(Tensor batch) {
                return batch;
            }
        });
        IllegalStateException e = assertThrows(IllegalStateException.class, odd::architecture);
        assertTrue(e.getMessage().contains("'custom'"), e.getMessage());
    }

    private static void assertMessage(Map<String, Tensor> p, String text, String... parts) {
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> Network.fromArchitecture(p, text));
        for (String part : parts) {
            assertTrue(e.getMessage().contains(part), "'" + part + "' missing from: " + e.getMessage());
        }
    }
}
