package dev.rungbook.runner;

import com.google.gson.JsonArray;
import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import dev.rungbook.kernel.CellOutput;
import dev.rungbook.render.MimeBundle;
import dev.rungbook.render.OutputSink;
import java.util.ArrayList;
import java.util.List;

/**
 * Collects one cell's outputs as nbformat 4 output objects: stream text (consecutive writes to one stream merged),
 * display_data (updated in place by display id), execute_result and error. Thread-safe.
 */
final class RecordingSink implements CellOutput.Publisher {
    private final List<JsonObject> outputs = new ArrayList<>();
    private final List<String> displayIds = new ArrayList<>();
    private boolean clearPending;

    @Override
    public synchronized void stream(OutputSink.Stream stream, String text) {
        applyPendingClear();
        String name = stream == OutputSink.Stream.STDOUT ? "stdout" : "stderr";
        if (!outputs.isEmpty()) {
            JsonObject last = outputs.get(outputs.size() - 1);
            if ("stream".equals(last.get("output_type").getAsString()) && name.equals(last.get("name").getAsString())) {
                last.addProperty("text", last.get("text").getAsString() + text);
                return;
            }
        }
        JsonObject o = new JsonObject();
        o.addProperty("output_type", "stream");
        o.addProperty("name", name);
        o.addProperty("text", text);
        add(o, null);
    }

    @Override
    public synchronized void display(MimeBundle bundle, String displayId) {
        applyPendingClear();
        JsonObject o = new JsonObject();
        o.addProperty("output_type", "display_data");
        o.add("data", data(bundle));
        o.add("metadata", metadata(bundle));
        add(o, displayId);
    }

    @Override
    public synchronized void update(String displayId, MimeBundle bundle) {
        for (int i = 0; i < outputs.size(); i++) {
            if (displayId != null && displayId.equals(displayIds.get(i))) {
                outputs.get(i).add("data", data(bundle));
                outputs.get(i).add("metadata", metadata(bundle));
            }
        }
    }

    @Override
    public synchronized void clear(boolean wait) {
        if (wait) {
            clearPending = true;
        } else {
            outputs.clear();
            displayIds.clear();
            clearPending = false;
        }
    }

    /** Adds the execute_result of the cell's last expression. */
    synchronized void result(MimeBundle bundle, int executionCount) {
        applyPendingClear();
        JsonObject o = new JsonObject();
        o.addProperty("output_type", "execute_result");
        o.addProperty("execution_count", executionCount);
        o.add("data", data(bundle));
        o.add("metadata", metadata(bundle));
        add(o, null);
    }

    /** Adds an error output. */
    synchronized void error(String ename, String evalue, List<String> traceback) {
        applyPendingClear();
        JsonObject o = new JsonObject();
        o.addProperty("output_type", "error");
        o.addProperty("ename", ename);
        o.addProperty("evalue", evalue);
        JsonArray tb = new JsonArray();
        traceback.forEach(tb::add);
        o.add("traceback", tb);
        add(o, null);
    }

    /** The outputs gathered so far, in order. */
    synchronized JsonArray outputs() {
        JsonArray a = new JsonArray();
        outputs.forEach(o -> a.add(o.deepCopy()));
        return a;
    }

    private void add(JsonObject o, String displayId) {
        outputs.add(o);
        displayIds.add(displayId);
    }

    private void applyPendingClear() {
        if (clearPending) {
            outputs.clear();
            displayIds.clear();
            clearPending = false;
        }
    }

    static JsonObject data(MimeBundle bundle) {
        JsonObject d = new JsonObject();
        bundle.data().forEach((k, v) -> d.add(k, Json.toJson(v)));
        return d;
    }

    static JsonObject metadata(MimeBundle bundle) {
        JsonObject m = new JsonObject();
        bundle.metadata().forEach((k, v) -> m.add(k, Json.toJson(v)));
        return m;
    }

}
