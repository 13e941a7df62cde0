package dev.rungbook.kernel;

import dev.rungbook.render.MimeBundle;
import dev.rungbook.render.Notebook;
import dev.rungbook.render.OutputSink;
import java.util.ArrayList;
import java.util.EnumSet;
import java.util.LinkedHashMap;
import java.util.List;
import java.util.Set;
import org.dflib.jjava.jupyter.kernel.history.HistoryEntry;
import org.dflib.jjava.jupyter.kernel.history.HistoryManager;
import org.dflib.jjava.jupyter.messages.request.HistoryRequest;
import org.dflib.jjava.jupyter.messages.request.KernelInfoRequest;
import java.util.Map;
import java.util.concurrent.Executors;
import java.util.concurrent.ScheduledExecutorService;
import java.util.concurrent.TimeUnit;
import java.util.function.Supplier;
import java.util.logging.Level;
import java.util.logging.Logger;
import org.dflib.jjava.jupyter.channels.ShellReplyEnvironment;
import org.dflib.jjava.jupyter.kernel.BaseKernel;
import org.dflib.jjava.jupyter.kernel.JupyterIO;
import org.dflib.jjava.jupyter.kernel.LanguageInfo;
import org.dflib.jjava.jupyter.kernel.ReplacementOptions;
import org.dflib.jjava.jupyter.kernel.comm.CommManager;
import org.dflib.jjava.jupyter.kernel.display.DisplayData;
import org.dflib.jjava.jupyter.kernel.display.Renderer;
import org.dflib.jjava.jupyter.kernel.magic.MagicsRegistry;
import org.dflib.jjava.jupyter.kernel.util.StringStyler;
import org.dflib.jjava.jupyter.messages.Message;
import org.dflib.jjava.jupyter.messages.MessageType;
import org.dflib.jjava.jupyter.messages.publish.PublishClearOutput;
import org.dflib.jjava.jupyter.messages.publish.PublishDisplayData;
import org.dflib.jjava.jupyter.messages.publish.PublishError;
import org.dflib.jjava.jupyter.messages.publish.PublishExecuteInput;
import org.dflib.jjava.jupyter.messages.publish.PublishExecuteResult;
import org.dflib.jjava.jupyter.messages.publish.PublishStream;
import org.dflib.jjava.jupyter.messages.publish.PublishUpdateDisplayData;
import org.dflib.jjava.jupyter.messages.reply.ErrorReply;
import org.dflib.jjava.jupyter.messages.request.ExecuteRequest;

/**
 * The Rungbook Jupyter kernel: jjava's protocol base with our own execution path. Cells run on a dedicated thread
 * through {@link CellRunner} / {@link CellEvaluator}; their output is batched by {@link CellOutput}; values are
 * rendered by {@link dev.rungbook.render.Renderers}. This is the only class (with {@link GuardedConnection},
 * {@link CellHistory} and {@link ExecuteOkReply}) that depends on jjava.
 */
public final class RungbookKernel extends BaseKernel {
    /** Version reported in kernel_info. */
    public static final String VERSION = "0.1.0";
    /** Jupyter messaging protocol version implemented. */
    static final String PROTOCOL_VERSION = "5.3";
    /** Interval at which pending cell output is sent. */
    static final long FLUSH_MILLIS = 40;
    private static final Logger LOG = Logger.getLogger(RungbookKernel.class.getName());

    private final CellRunner runner;
    private final CellHistory history;
    private final ScheduledExecutorService timer;
    private final long outputLimit;
    private volatile CellOutput activeOutput;
    private volatile Runnable abortQueued = () -> { };
    private CellOutput previousOutput;
    private int previousCount;
    private boolean startupShown;

    private RungbookKernel(CellHistory history, CellRunner runner, ScheduledExecutorService timer, long outputLimit) {
        super("rungbook", VERSION, languageInfo(), List.of(), history, new JupyterIO(java.nio.charset.StandardCharsets.UTF_8),
                new CommManager(), new Renderer(), null, new MagicsRegistry(), false,
                new StringStyler.Builder().build());
        this.history = history;
        this.runner = runner;
        this.timer = timer;
        this.outputLimit = outputLimit;
        timer.scheduleAtFixedRate(this::flushActive, FLUSH_MILLIS, FLUSH_MILLIS, TimeUnit.MILLISECONDS);
    }

    /**
     * A kernel whose session is created in the background by {@link #startSession()}.
     *
     * @param evaluator creates the session
     * @param outputLimit characters a cell may print before its output is truncated
     */
    public static RungbookKernel create(Supplier<CellEvaluator> evaluator, long outputLimit) {
        ScheduledExecutorService timer = Executors.newSingleThreadScheduledExecutor(r -> {
            Thread t = new Thread(r, "rungbook-timer");
            t.setDaemon(true);
            return t;
        });
        OutputRouter.install();
        return new RungbookKernel(new CellHistory(), new CellRunner(evaluator, timer), timer, outputLimit);
    }

    private static LanguageInfo languageInfo() {
        return new LanguageInfo("java", Runtime.version().toString(), "text/x-java-source", ".jsh", "java",
                "text/x-java", "script");
    }

    @Override
    public String getBanner() {
        return "Rungbook " + VERSION + " (Java " + Runtime.version() + ", JShell)";
    }

    /**
     * What to do after a cell failed with {@code stop_on_error}: normally abort the execute requests already waiting
     * (the connection provides this).
     */
    void onStopOnError(Runnable abortQueuedRequests) {
        this.abortQueued = abortQueuedRequests;
    }

    /**
     * Starts creating the JShell session in the background; called once the sockets are bound, so that the kernel
     * answers kernel_info while JShell warms up. The first cell waits for the session.
     */
    public void startSession() {
        runner.start();
    }

    private void flushActive() {
        CellOutput o = activeOutput;
        if (o != null) {
            try {
                o.flush();
            } catch (RuntimeException | Error e) {
                // A failed flush must not cancel the periodic flushing of later cells.
                LOG.log(Level.FINE, "flushing cell output failed", e);
            }
        }
    }

    @Override
    protected synchronized void handleExecuteRequest(ShellReplyEnvironment env, Message<ExecuteRequest> message) {
        commManager.setMessageContext(message);
        ExecuteRequest request = message.getContent();
        String code = request.getCode();
        boolean silent = request.isSilent();
        int count = silent ? executionCount.get() : executionCount.getAndIncrement();
        env.setBusyDeferIdle();
        if (!silent) {
            env.publish(new PublishExecuteInput(code, count));
        }
        CellOutput output = new CellOutput(new EnvPublisher(env), outputLimit);
        List<Map<String, Object>> payload = new ArrayList<>();
        CellResult result;
        activeOutput = output;
        try {
            announce(output);
            String page = pagerQuery(code);
            if (page != null) {
                String doc = runner.evaluator().inspect(page, page.length());
                payload.add(ExecuteOkReply.page(doc.isEmpty() ? "No documentation found for " + page.strip() : doc));
                result = CellResult.Success.noValue();
            } else {
                result = runner.run(code, count, output);
            }
        } catch (RuntimeException | Error e) {
            result = kernelFailure(e);
        } finally {
            activeOutput = null;
            output.close();
            previousOutput = output;
            previousCount = count;
        }
        String plain = null;
        if (result instanceof CellResult.Success s) {
            if (s.hasValue() && !silent) {
                MimeBundle bundle = Notebook.renderSafely(s.value().orElse(null));
                plain = bundle.plainText();
                env.publish(new PublishExecuteResult(count, toDisplayData(bundle, null)));
            }
            env.reply(new ExecuteOkReply(count, payload));
        } else {
            CellSession.Failure f = CellSession.Failure.of(result);
            env.publish(new PublishError(f.ename(), f.evalue(), f.traceback()));
            ErrorReply reply = new ErrorReply(f.ename(), f.evalue(), f.traceback());
            reply.setExecutionCount(count);
            env.replyError(MessageType.EXECUTE_REPLY.error(), reply);
            if (request.shouldStopOnError()) {
                abortQueued.run();
            }
        }
        if (request.shouldStoreHistory() && !silent) {
            history.add(count, code, plain);
        }
    }

    /** Notices for the cell's output: start-up problems (once) and output dropped after the previous cell. */
    private void announce(CellOutput output) {
        if (!startupShown) {
            startupShown = true;
            for (String p : runner.evaluator().startupProblems()) {
                output.append(OutputSink.Stream.STDERR, "[rungbook: " + p + "]\n");
            }
        }
        if (previousOutput != null && previousOutput.droppedAfterClose() > 0) {
            output.append(OutputSink.Stream.STDERR, "[rungbook: " + previousOutput.droppedAfterClose()
                    + " characters of output from threads of cell [" + previousCount
                    + "] arrived after it had finished and were dropped]\n");
            previousOutput = null;
        }
    }

    /** {@code expr?} asks for the documentation of {@code expr} in the pager. */
    static String pagerQuery(String code) {
        String s = code.strip();
        if (s.length() < 2 || !s.endsWith("?") || s.contains("\n") || s.endsWith("??")) {
            return null;
        }
        String target = s.substring(0, s.length() - 1).strip();
        return target.matches("[\\p{L}_$][\\p{L}\\p{N}_$.]*") ? target : null;
    }

    private static CellResult kernelFailure(Throwable e) {
        LOG.log(Level.WARNING, "cell execution failed inside the kernel", e);
        return new CellResult.RuntimeFailure(e.getClass().getName(), String.valueOf(e.getMessage()),
                new Tracebacks(id -> null).format(Tracebacks.of(e)), false);
    }

    static DisplayData toDisplayData(MimeBundle bundle, String displayId) {
        DisplayData d = new DisplayData();
        bundle.data().forEach(d::putData);
        bundle.metadata().forEach(d::putMetaData);
        if (displayId != null) {
            d.setDisplayId(displayId);
        }
        return d;
    }

    /** Sends a cell's output over IOPub with the execute request as parent. */
    private static final class EnvPublisher implements CellOutput.Publisher {
        private final ShellReplyEnvironment env;

        EnvPublisher(ShellReplyEnvironment env) {
            this.env = env;
        }

        @Override
        public void stream(OutputSink.Stream stream, String text) {
            env.publish(new PublishStream(stream == OutputSink.Stream.STDOUT ? PublishStream.StreamType.OUT
                    : PublishStream.StreamType.ERR, text));
        }

        @Override
        public void display(MimeBundle bundle, String displayId) {
            env.publish(new PublishDisplayData(toDisplayData(bundle, displayId)));
        }

        @Override
        public void update(String displayId, MimeBundle bundle) {
            env.publish(new PublishUpdateDisplayData(toDisplayData(bundle, displayId)));
        }

        @Override
        public void clear(boolean wait) {
            env.publish(wait ? PublishClearOutput.BEFORE_NEXT_OUTPUT : PublishClearOutput.NOW);
        }
    }

    @Override
    protected void handleKernelInfoRequest(ShellReplyEnvironment env, Message<KernelInfoRequest> message) {
        env.setBusyDeferIdle();
        LanguageInfo l = getLanguageInfo();
        Map<String, Object> language = new LinkedHashMap<>();
        language.put("name", l.getName());
        language.put("version", l.getVersion());
        language.put("mimetype", l.getMimetype());
        language.put("file_extension", l.getFileExtension());
        language.put("pygments_lexer", l.getPygmentsLexer());
        language.put("codemirror_mode", l.getCodemirrorMode());
        language.put("nbconvert_exporter", l.getNbconvertExporter());
        Map<String, Object> content = new LinkedHashMap<>();
        content.put("protocol_version", PROTOCOL_VERSION);
        content.put("implementation", "rungbook");
        content.put("implementation_version", VERSION);
        content.put("language_info", language);
        content.put("banner", getBanner());
        content.put("help_links", List.of());
        content.put("debugger", false);
        env.reply(new MapReply(MessageType.KERNEL_INFO_REPLY, MessageType.KERNEL_INFO_REQUEST, content));
    }

    @Override
    protected void handleHistoryRequest(ShellReplyEnvironment env, Message<HistoryRequest> message) {
        env.setBusyDeferIdle();
        HistoryRequest request = message.getContent();
        Set<HistoryManager.ResultFlag> flags = EnumSet.noneOf(HistoryManager.ResultFlag.class);
        if (request.includeOutput()) {
            flags.add(HistoryManager.ResultFlag.INCLUDE_OUTPUT);
        }
        List<HistoryEntry> entries;
        if (request instanceof HistoryRequest.Tail t) {
            entries = history.lookupTail(t.getMaxReturnLength(), flags);
        } else if (request instanceof HistoryRequest.Range r) {
            entries = history.lookupRange(r.getSessionIndex(), r.getStart(), r.getStop(), flags);
        } else if (request instanceof HistoryRequest.Search s) {
            if (s.filterUnique()) {
                flags.add(HistoryManager.ResultFlag.UNIQUE);
            }
            entries = history.search(s.getPattern(), s.getMaxReturnLength(), flags);
        } else {
            entries = List.of();
        }
        List<List<Object>> rows = new ArrayList<>();
        for (HistoryEntry e : entries) {
            Object cell = e.hasOutput() ? List.of(e.getInput(), e.getOutput()) : e.getInput();
            rows.add(List.of(e.getSession(), e.getCellNumber(), cell));
        }
        env.reply(new MapReply(MessageType.HISTORY_REPLY, MessageType.HISTORY_REQUEST, Map.of("history", rows)));
    }

    @Override
    public Object evalRaw(String code) {
        CellResult r = runner.run(code, executionCount.get(), Notebook.current());
        if (r instanceof CellResult.Success s) {
            return s.value().orElse(null);
        }
        throw new IllegalStateException("cell failed: " + r);
    }

    @Override
    public DisplayData inspect(String code, int at, boolean extraDetail) {
        String doc = runner.evaluator().inspect(code, at);
        if (doc.isEmpty()) {
            return null;
        }
        DisplayData d = new DisplayData();
        d.putText(doc);
        return d;
    }

    @Override
    public ReplacementOptions complete(String code, int at) {
        CellEvaluator.Completion c = runner.evaluator().complete(code, at);
        return new ReplacementOptions(c.matches(), c.start(), c.end());
    }

    @Override
    public String isComplete(String code) {
        switch (runner.evaluator().isComplete(code)) {
            case COMPLETE:
                return IS_COMPLETE_YES;
            case INVALID:
                return IS_COMPLETE_BAD;
            default:
                return "";
        }
    }

    @Override
    public void interrupt() {
        runner.interrupt();
    }

    @Override
    public List<String> formatError(Throwable e) {
        return new Tracebacks(id -> null).format(Tracebacks.of(e));
    }

    @Override
    public void onShutdown(boolean restart) {
        runner.close();
        timer.shutdownNow();
    }
}
