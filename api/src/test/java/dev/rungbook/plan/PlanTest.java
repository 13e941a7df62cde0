package dev.rungbook.plan;

import static org.junit.jupiter.api.Assertions.assertArrayEquals;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertNotEquals;
import static org.junit.jupiter.api.Assertions.assertSame;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import dev.rungbook.nn.Network;
import dev.rungbook.nn.WeightedLayer;
import dev.rungbook.quant.Quantizer;
import dev.rungbook.range.RangeRule;
import dev.rungbook.tensor.FloatFormat;
import dev.rungbook.tensor.Tensor;
import java.nio.charset.StandardCharsets;
import java.nio.file.Path;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Map;
import org.junit.jupiter.api.Test;
import org.junit.jupiter.api.io.TempDir;

class PlanTest {
    private static Plan twoLayers() {
        Map<String, Quantizer> m = new LinkedHashMap<>();
        m.put("fc2", Quantizer.linear(4));
        m.put("fc1", Quantizer.linear(8).perTensor());
        return Plan.of(m);
    }

    @Test
    void appliesToANetworkLayerByLayerAndLeavesUnplannedLayersFloat() {
        Network net = PlanFixtures.tinyMlp(1);
        Network q = twoLayers().apply(net);
        List<WeightedLayer> before = net.weightedLayers();
        List<WeightedLayer> after = q.weightedLayers();
        assertArrayEquals(Quantizer.linear(8).perTensor().apply(before.get(0).weight()).dequantized()
                .toFloatArray(), after.get(0).weight().toFloatArray());
        assertArrayEquals(Quantizer.linear(4).apply(before.get(1).weight()).dequantized().toFloatArray(),
                after.get(1).weight().toFloatArray());
        assertSame(before.get(2), after.get(2));
        assertArrayEquals(before.get(1).bias().toFloatArray(), after.get(1).bias().toFloatArray());
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> twoLayers().with("fc9", Quantizer.linear(4)).apply(net));
        assertTrue(e.getMessage().contains("'fc9'") && e.getMessage().contains("fc1"), e.getMessage());
    }

    @Test
    void appliesToCheckpointTensorsAndKeepsTheRest() {
        Network net = PlanFixtures.tinyMlp(2);
        Map<String, Tensor> params = net.parameters();
        Map<String, Tensor> out = twoLayers().apply(params);
        assertEquals(List.copyOf(params.keySet()), List.copyOf(out.keySet()));
        Network viaTensors = Network.mlp(out, "fc1", "fc2", "fc3");
        Network viaNetwork = twoLayers().apply(net);
        for (int i = 0; i < 3; i++) {
            assertArrayEquals(viaNetwork.weightedLayers().get(i).weight().toFloatArray(),
                    viaTensors.weightedLayers().get(i).weight().toFloatArray());
        }
        assertSame(params.get("fc1.bias"), out.get("fc1.bias"));
        assertEquals("fc2.weight", twoLayers().quantize(params).get("fc2.weight").source().name());
        Map<String, Tensor> missing = new LinkedHashMap<>(params);
        missing.remove("fc2.weight");
        IllegalArgumentException e = assertThrows(IllegalArgumentException.class,
                () -> twoLayers().apply(missing));
        assertTrue(e.getMessage().contains("'fc2.weight'"), e.getMessage());
    }

    @Test
    void roundTripsThroughAPlanFile(@TempDir Path dir) {
        Map<String, Quantizer> m = new LinkedHashMap<>();
        m.put("fc1", Quantizer.linear(4).perGroup(1, 32).range(RangeRule.mse()));
        m.put("fc2", Quantizer.linear(8).asymmetric().perTensor());
        m.put("fc3", Quantizer.nf4());
        m.put("head", Quantizer.floatFormat(FloatFormat.E4M3));
        m.put("emb", Quantizer.ternary().perChannel(0));
        Plan p = Plan.of(m).withInfo("budget_bytes", "40960");
        Path f = dir.resolve("plan.json");
        p.write(f);
        Plan back = Plan.read(f);
        assertEquals(p, back);
        assertEquals(List.of("fc1", "fc2", "fc3", "head", "emb"), back.layers());
        assertEquals(p.toJson(), back.toJson());
        assertTrue(p.toJson().contains("\"spec\": \"" + m.get("fc1").toText() + "\""), p.toJson());
    }

    @Test
    void aSpecThatDoesNotParseIsRefusedNamingTheFieldAndTheToken() {
        PlanFormatException e = assertThrows(PlanFormatException.class, () -> Plan.parse(
                ("{\"rungbook_plan\": 1, \"layers\": [{\"layer\": \"fc1\", \"spec\": \"int8\"}, "
                        + "{\"layer\": \"fc2\", \"spec\": \"int4 per-grop(1,32)\"}]}")
                        .getBytes(StandardCharsets.UTF_8), Path.of("my-plan.json")));
        assertEquals("layers[1].spec", e.field());
        assertTrue(e.getMessage().startsWith("my-plan.json: field 'layers[1].spec': layer 'fc2': "), e.getMessage());
        assertTrue(e.getMessage().contains("per-grop"), e.getMessage());
        // A spec without a text form cannot be written, and the message names the layer.
        Plan learned = Plan.of(Map.of("fc1", Quantizer.linear(4).rounding(dev.rungbook.round.Rounding.custom(
                "up", (v, i) -> Math.ceil(v)))));
        IllegalArgumentException w = assertThrows(IllegalArgumentException.class, learned::toJson);
        assertTrue(w.getMessage().contains("layer 'fc1'"), w.getMessage());
    }

    @Test
    void isAValueWithOrderAndInfo() {
        Plan p = twoLayers();
        assertEquals(List.of("fc2", "fc1"), p.layers());
        assertEquals(p, twoLayers());
        assertEquals(p.hashCode(), twoLayers().hashCode());
        assertNotEquals(p, p.withInfo("budget_bytes", "10"));
        assertEquals(Quantizer.linear(4), p.spec("fc2"));
        assertThrows(IllegalArgumentException.class, () -> p.spec("fc3"));
        assertThrows(IllegalArgumentException.class, () -> p.with(" ", Quantizer.linear(4)));
        assertTrue(p.toString().contains("fc2: int4 sym per-channel(0)"), p.toString());
        // Replacing a layer keeps its place.
        assertEquals(List.of("fc2", "fc1"), p.with("fc2", Quantizer.linear(8)).layers());
    }
}
