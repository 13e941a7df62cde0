package dev.rungbook.runner;

import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertTrue;
import static org.junit.jupiter.api.Assumptions.assumeTrue;

import com.google.gson.JsonArray;
import com.google.gson.JsonElement;
import com.google.gson.JsonObject;
import com.google.gson.JsonParser;
import dev.rungbook.install.KernelSpec;
import dev.rungbook.testing.Fixtures;
import java.io.IOException;
import java.net.ServerSocket;
import java.net.URI;
import java.net.http.HttpClient;
import java.net.http.HttpRequest;
import java.net.http.HttpResponse;
import java.net.http.WebSocket;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.time.Duration;
import java.util.ArrayList;
import java.util.Base64;
import java.util.List;
import java.util.Map;
import java.util.concurrent.CompletableFuture;
import java.util.concurrent.CompletionStage;
import java.util.concurrent.ConcurrentHashMap;
import java.util.concurrent.TimeUnit;
import java.util.concurrent.atomic.AtomicInteger;
import org.junit.jupiter.api.Test;

/**
 * End to end, as a practitioner sees it: Jupyter Notebook's web interface in headless Chromium opens a notebook on the
 * Rungbook kernel, runs all cells, and a rendered HTML table and a chart image appear in the page. Chromium is driven
 * through its DevTools protocol over the JDK's own WebSocket client. Skips itself when {@code chromium} or
 * {@code jupyter-notebook} is missing ({@code ./rungbook test} installs both on Debian).
 */
class NotebookBrowserTest {
    private static final String TOKEN = "rungbook-e2e";

    @Test
    void runAllInTheWebInterfaceShowsATableAndAChart() throws Exception {
        Path chromium = onPath("chromium");
        Path notebookApp = onPath("jupyter-notebook");
        assumeTrue(chromium != null && notebookApp != null, "chromium or jupyter-notebook not installed");

        Path root = Fixtures.tempDir("e2e").toAbsolutePath();
        Path prefix = root.resolve("prefix");
        KernelSpec.install(KernelSpec.prefixKernelsDir(prefix), KernelSpec.argv(List.of("-Xmx768m")));
        Path notebooks = Files.createDirectories(root.resolve("notebooks"));
        Files.writeString(notebooks.resolve("e2e.ipynb"), notebook(List.of(
                "Table t = Table.create(\"ranges\", StringColumn.create(\"rule\", \"min-max\", \"mse\"),\n"
                        + "    DoubleColumn.create(\"sqnr_db\", 38.2, 41.7));\nt",
                "XYChart c = new XYChartBuilder().width(600).height(400).title(\"error vs bits\").build();\n"
                        + "c.addSeries(\"mse\", new double[] {2, 4, 8}, new double[] {0.3, 0.05, 0.001});\nc")),
                StandardCharsets.UTF_8);

        int port = freePort();
        List<Process> processes = new ArrayList<>();
        try {
            ProcessBuilder server = new ProcessBuilder(notebookApp.toString(), "--no-browser", "--ip=127.0.0.1",
                    "--port=" + port, "--port-retries=0", "--NotebookApp.token=" + TOKEN,
                    "--notebook-dir=" + notebooks, "--allow-root")
                    .redirectErrorStream(true).redirectOutput(root.resolve("jupyter.log").toFile());
            Map<String, String> env = server.environment();
            env.put("JUPYTER_PATH", prefix.resolve("share").resolve("jupyter").toString());
            env.put("JUPYTER_CONFIG_DIR", Files.createDirectories(root.resolve("config")).toString());
            env.put("JUPYTER_RUNTIME_DIR", Files.createDirectories(root.resolve("runtime")).toString());
            env.put("JUPYTER_DATA_DIR", Files.createDirectories(root.resolve("data")).toString());
            processes.add(server.start());
            String base = "http://127.0.0.1:" + port;
            waitForHttp(base + "/api/status?token=" + TOKEN, root.resolve("jupyter.log"));

            Path profile = Files.createDirectories(root.resolve("chromium-profile"));
            // Flags as for any headless Chromium on a closed network: no sandbox as root, no background traffic.
            processes.add(new ProcessBuilder(chromium.toString(), "--headless", "--no-sandbox", "--disable-gpu",
                    "--disable-quic", "--no-first-run", "--disable-background-networking",
                    "--disable-component-update", "--disable-sync", "--remote-allow-origins=*",
                    "--remote-debugging-port=0", "--window-size=1280,2000", "--user-data-dir=" + profile,
                    "about:blank").redirectErrorStream(true).redirectOutput(root.resolve("chromium.log").toFile())
                    .start());
            try (DevTools page = DevTools.connect(profile)) {
                page.call("Page.navigate", Map.of("url", base + "/notebooks/e2e.ipynb?token=" + TOKEN));
                page.waitFor("typeof Jupyter !== 'undefined' && Jupyter.notebook && Jupyter.notebook.kernel"
                        + " && Jupyter.notebook.kernel.is_connected()", 120, "the notebook's kernel to connect");
                page.eval("Jupyter.notebook.execute_all_cells(); true");
                page.waitFor("Jupyter.notebook.get_cells().filter(c => c.cell_type === 'code')"
                        + ".every(c => typeof c.input_prompt_number === 'number')"
                        + " && Jupyter.notebook.kernel_busy === false", 180, "every cell to finish");
                String screenshot = page.call("Page.captureScreenshot", Map.of("format", "png"))
                        .get("data").getAsString();
                Path png = Path.of("target", "e2e-notebook.png");
                Files.write(png, Base64.getDecoder().decode(screenshot));

                assertEquals("0", page.eval("String(document.querySelectorAll('.output_error').length)"),
                        "error outputs in the page (screenshot: " + png.toAbsolutePath() + ")");
                // The table: our HTML renderer's <table> with the header cells and a number, inside an HTML output.
                String table = page.eval("(() => { const t = document.querySelector('.output_html table');"
                        + " return t ? t.innerText : ''; })()");
                assertTrue(table.contains("rule") && table.contains("sqnr_db") && table.contains("41.7"),
                        "rendered table text: " + table);
                // The chart: an image output drawn at its 600x400 size. Jupyter Notebook prefers our SVG to the PNG
                // (its display order), so either counts; a PNG must have been decoded to real pixels.
                String image = page.eval("(() => { const i = document.querySelector('.output_png img');"
                        + " if (i && i.complete && i.naturalWidth > 0) return 'png ' + i.naturalWidth + 'x' + i.naturalHeight;"
                        + " const s = document.querySelector('.output_svg svg');"
                        + " if (!s) return ''; const r = s.getBoundingClientRect();"
                        + " return 'svg ' + Math.round(r.width) + 'x' + Math.round(r.height); })()");
                assertTrue(image.matches("(png|svg) \\d+x\\d+"), "no chart image in the page: '" + image + "'");
                String[] size = image.substring(4).split("x");
                assertTrue(Integer.parseInt(size[0]) >= 600 && Integer.parseInt(size[1]) >= 400,
                        "chart drawn at " + image);
            }
        } finally {
            for (Process p : processes) {
                p.descendants().forEach(ProcessHandle::destroyForcibly);
                p.destroyForcibly();
                p.waitFor(10, TimeUnit.SECONDS);
            }
        }
    }

    private static String notebook(List<String> sources) {
        JsonArray cells = new JsonArray();
        for (String src : sources) {
            JsonObject cell = new JsonObject();
            cell.addProperty("cell_type", "code");
            cell.add("metadata", new JsonObject());
            cell.add("execution_count", com.google.gson.JsonNull.INSTANCE);
            cell.add("outputs", new JsonArray());
            cell.addProperty("source", src);
            cells.add(cell);
        }
        JsonObject spec = new JsonObject();
        spec.addProperty("name", KernelSpec.NAME);
        spec.addProperty("display_name", KernelSpec.DISPLAY_NAME);
        spec.addProperty("language", "java");
        JsonObject meta = new JsonObject();
        meta.add("kernelspec", spec);
        JsonObject nb = new JsonObject();
        nb.add("cells", cells);
        nb.add("metadata", meta);
        nb.addProperty("nbformat", 4);
        nb.addProperty("nbformat_minor", 5);
        return nb.toString();
    }

    private static Path onPath(String command) {
        for (String dir : System.getenv().getOrDefault("PATH", "").split(java.io.File.pathSeparator)) {
            Path p = Path.of(dir, command);
            if (Files.isExecutable(p)) {
                return p;
            }
        }
        return null;
    }

    private static int freePort() throws IOException {
        try (ServerSocket s = new ServerSocket(0)) {
            return s.getLocalPort();
        }
    }

    private static void waitForHttp(String url, Path log) throws Exception {
        HttpClient http = HttpClient.newHttpClient();
        long deadline = System.nanoTime() + TimeUnit.SECONDS.toNanos(60);
        while (System.nanoTime() < deadline) {
            try {
                HttpResponse<String> r = http.send(HttpRequest.newBuilder(URI.create(url))
                        .timeout(Duration.ofSeconds(5)).build(), HttpResponse.BodyHandlers.ofString());
                if (r.statusCode() == 200) {
                    return;
                }
            } catch (IOException e) {
                // not listening yet
            }
            Thread.sleep(200);
        }
        throw new AssertionError("Jupyter Notebook did not answer at " + url + ":\n" + Files.readString(log));
    }

    /** A minimal client of Chromium's DevTools protocol for one page: calls and JavaScript evaluation. */
    private static final class DevTools implements WebSocket.Listener, AutoCloseable {
        private final Map<Integer, CompletableFuture<JsonObject>> pending = new ConcurrentHashMap<>();
        private final AtomicInteger ids = new AtomicInteger();
        private final StringBuilder partial = new StringBuilder();
        private WebSocket socket;

        /** Connects to the first page target of the Chromium whose profile folder is {@code profile}. */
        static DevTools connect(Path profile) throws Exception {
            Path portFile = profile.resolve("DevToolsActivePort");
            long deadline = System.nanoTime() + TimeUnit.SECONDS.toNanos(60);
            while (!(Files.isRegularFile(portFile) && Files.size(portFile) > 0)) {
                if (System.nanoTime() > deadline) {
                    throw new AssertionError("Chromium did not open its DevTools port");
                }
                Thread.sleep(100);
            }
            String port = Files.readAllLines(portFile).get(0).strip();
            HttpClient http = HttpClient.newHttpClient();
            String list = http.send(HttpRequest.newBuilder(URI.create("http://127.0.0.1:" + port + "/json/list"))
                    .build(), HttpResponse.BodyHandlers.ofString()).body();
            String ws = null;
            for (JsonElement e : JsonParser.parseString(list).getAsJsonArray()) {
                JsonObject target = e.getAsJsonObject();
                if ("page".equals(target.get("type").getAsString())) {
                    ws = target.get("webSocketDebuggerUrl").getAsString();
                    break;
                }
            }
            assertTrue(ws != null, "no page target in " + list);
            DevTools d = new DevTools();
            d.socket = http.newWebSocketBuilder().buildAsync(URI.create(ws), d).get(30, TimeUnit.SECONDS);
            return d;
        }

        JsonObject call(String method, Map<String, Object> params) throws Exception {
            int id = ids.incrementAndGet();
            CompletableFuture<JsonObject> f = new CompletableFuture<>();
            pending.put(id, f);
            JsonObject msg = new JsonObject();
            msg.addProperty("id", id);
            msg.addProperty("method", method);
            msg.add("params", new com.google.gson.Gson().toJsonTree(params));
            socket.sendText(msg.toString(), true).get(30, TimeUnit.SECONDS);
            JsonObject reply = f.get(60, TimeUnit.SECONDS);
            if (reply.has("error")) {
                throw new AssertionError(method + ": " + reply.get("error"));
            }
            return reply.getAsJsonObject("result");
        }

        /** Evaluates a JavaScript expression in the page; returns its value as a string ("" for undefined). */
        String eval(String expression) throws Exception {
            JsonObject r = call("Runtime.evaluate", Map.of("expression", expression, "returnByValue", true));
            if (r.has("exceptionDetails")) {
                return "";
            }
            JsonElement v = r.getAsJsonObject("result").get("value");
            return v == null || v.isJsonNull() ? "" : v.getAsString();
        }

        void waitFor(String condition, int seconds, String what) throws Exception {
            long deadline = System.nanoTime() + TimeUnit.SECONDS.toNanos(seconds);
            while (System.nanoTime() < deadline) {
                if ("true".equals(eval("String(Boolean(" + condition + "))"))) {
                    return;
                }
                Thread.sleep(250);
            }
            throw new AssertionError("timed out after " + seconds + " s waiting for " + what);
        }

        @Override
        public CompletionStage<?> onText(WebSocket ws, CharSequence data, boolean last) {
            partial.append(data);
            if (last) {
                JsonObject msg = JsonParser.parseString(partial.toString()).getAsJsonObject();
                partial.setLength(0);
                if (msg.has("id")) {
                    CompletableFuture<JsonObject> f = pending.remove(msg.get("id").getAsInt());
                    if (f != null) {
                        f.complete(msg);
                    }
                }
            }
            ws.request(1);
            return null;
        }

        @Override
        public void close() {
            socket.abort();
        }
    }
}
