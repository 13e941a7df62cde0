package dev.rungbook.kernel;

import com.google.gson.Gson;
import com.google.gson.GsonBuilder;
import com.google.gson.JsonElement;
import com.google.gson.JsonParser;
import com.google.gson.reflect.TypeToken;
import java.nio.charset.StandardCharsets;
import java.security.InvalidKeyException;
import java.security.MessageDigest;
import java.util.ArrayList;
import java.util.Arrays;
import java.util.List;
import java.util.Map;
import org.dflib.jjava.jupyter.kernel.ExpressionValue;
import org.dflib.jjava.jupyter.kernel.history.HistoryEntry;
import org.dflib.jjava.jupyter.messages.Header;
import org.dflib.jjava.jupyter.messages.KernelTimestamp;
import org.dflib.jjava.jupyter.messages.MessageType;
import org.dflib.jjava.jupyter.messages.ReplyType;
import org.dflib.jjava.jupyter.messages.adapters.ExpressionValueAdapter;
import org.dflib.jjava.jupyter.messages.adapters.HeaderAdapter;
import org.dflib.jjava.jupyter.messages.adapters.HistoryEntryAdapter;
import org.dflib.jjava.jupyter.messages.adapters.HistoryRequestAdapter;
import org.dflib.jjava.jupyter.messages.adapters.KernelTimestampAdapter;
import org.dflib.jjava.jupyter.messages.adapters.MessageTypeAdapter;
import org.dflib.jjava.jupyter.messages.adapters.PublishStatusAdapter;
import org.dflib.jjava.jupyter.messages.adapters.ReplyTypeAdapter;
import org.dflib.jjava.jupyter.messages.request.HistoryRequest;
import java.security.NoSuchAlgorithmException;
import java.util.logging.Level;
import java.util.logging.Logger;
import org.dflib.jjava.jupyter.channels.JupyterConnection;
import org.dflib.jjava.jupyter.channels.ShellChannel;
import org.dflib.jjava.jupyter.channels.ShellHandler;
import org.dflib.jjava.jupyter.channels.ShellReplyEnvironment;
import org.dflib.jjava.jupyter.kernel.KernelConnectionProperties;
import org.dflib.jjava.jupyter.messages.HMACGenerator;
import org.dflib.jjava.jupyter.messages.Message;
import org.dflib.jjava.jupyter.messages.publish.PublishStatus;
import org.zeromq.ZMQ;

/**
 * The Jupyter connection of the kernel: jjava's heartbeat, stdin and IOPub sockets, with shell and control sockets of
 * our own whose loops survive bad messages. jjava 1.0-a6 checks the HMAC signature of each message, but its shell
 * loop dies on the exception a bad or missing signature raises, which would leave the kernel deaf, and a message with
 * too few frames makes it read into the next message; here each multipart message is read whole, its signature is
 * compared in constant time, and a bad, missing or malformed message is dropped with a log line. All sockets bind only to the transport, address and
 * ports of the connection file.
 */
final class GuardedConnection extends JupyterConnection {
    private static final Logger LOG = Logger.getLogger(GuardedConnection.class.getName());

    private final KernelConnectionProperties props;
    private final ZMQ.Context guardedContext = ZMQ.context(1);
    private final GuardedShellChannel guardedShell;
    private final GuardedShellChannel guardedControl;

    GuardedConnection(KernelConnectionProperties props) throws NoSuchAlgorithmException, InvalidKeyException {
        super(props);
        this.props = props;
        HMACGenerator hmac = props.createHMACGenerator();
        this.guardedShell = new GuardedShellChannel(guardedContext, hmac, false, this);
        this.guardedControl = new GuardedShellChannel(guardedContext, hmac, true, this);
    }

    @Override
    public void connect() {
        heartbeat.bind(props);
        guardedShell.bind(props);
        guardedControl.bind(props);
        stdin.bind(props);
        iopub.bind(props);
        iopub.sendMessage(new Message<>(null, PublishStatus.MESSAGE_TYPE, PublishStatus.STARTING));
    }

    /**
     * Answers every execute request already waiting on the shell socket with status {@code aborted} (other waiting
     * requests are handled normally), as clients expect after a cell failed with {@code stop_on_error}. Must be
     * called on the shell loop's thread, i.e. from a shell request handler.
     */
    void abortQueuedExecuteRequests() {
        guardedShell.abortQueuedExecuteRequests();
    }

    @Override
    public void close() {
        guardedShell.close();
        guardedControl.close();
        super.close();
        guardedContext.close();
    }

    @Override
    public void waitUntilClose() {
        guardedShell.waitUntilClose();
        guardedControl.waitUntilClose();
        super.waitUntilClose();
    }

    /** A shell or control socket with a loop that drops unreadable or badly signed messages instead of dying. */
    static final class GuardedShellChannel extends ShellChannel {
        private static final long POLL_MILLIS = 50;
        /** Limits of one incoming message; larger ones are dropped whole. */
        static final int MAX_FRAMES = 1024;
        static final long MAX_BYTES = 256L * 1024 * 1024;
        private static final byte[] DELIMITER = "<IDS|MSG>".getBytes(StandardCharsets.US_ASCII);
        private static final java.lang.reflect.Type JSON_MAP = new TypeToken<Map<String, Object>>() { }.getType();
        /** Parses messages as jjava's sockets do (same adapters). */
        private static final Gson WIRE = new GsonBuilder()
                .registerTypeAdapter(KernelTimestamp.class, KernelTimestampAdapter.INSTANCE)
                .registerTypeAdapter(Header.class, HeaderAdapter.INSTANCE)
                .registerTypeAdapter(MessageType.class, MessageTypeAdapter.INSTANCE)
                .registerTypeAdapter(PublishStatus.class, PublishStatusAdapter.INSTANCE)
                .registerTypeAdapter(HistoryRequest.class, HistoryRequestAdapter.INSTANCE)
                .registerTypeHierarchyAdapter(ReplyType.class, new ReplyTypeAdapter(new GsonBuilder()
                        .registerTypeAdapter(HistoryEntry.class, HistoryEntryAdapter.INSTANCE)
                        .registerTypeAdapter(ExpressionValue.class, ExpressionValueAdapter.INSTANCE).create()))
                .create();
        private final boolean control;
        private final GuardedConnection connection;
        private volatile boolean running;
        private Thread loop;
        private ZMQ.Poller poller;

        GuardedShellChannel(ZMQ.Context ctx, HMACGenerator hmac, boolean control, GuardedConnection connection) {
            super(ctx, hmac, control, connection, POLL_MILLIS);
            this.control = control;
            this.connection = connection;
        }

        @Override
        public void bind(KernelConnectionProperties p) {
            String address = formatAddress(p.getTransport(), p.getIp(), control ? p.getControlPort() : p.getShellPort());
            if (!bind(address)) {
                throw new IllegalStateException("cannot bind " + name() + " socket to " + address);
            }
            ZMQ.Poller poller = ctx.poller(1);
            poller.register(this, ZMQ.Poller.POLLIN);
            this.poller = poller;
            running = true;
            loop = new Thread(() -> {
                while (running) {
                    try {
                        if (poller.poll(POLL_MILLIS) > 0 && running) {
                            handleOne();
                        }
                    } catch (RuntimeException | Error e) {
                        // Also an OutOfMemoryError that struck this thread: the loop must outlive it.
                        if (running) {
                            LOG.log(Level.WARNING, name() + ": error in message loop, continuing", e);
                        }
                    }
                }
            }, "rungbook-" + name());
            loop.setDaemon(true);
            loop.start();
        }

        /**
         * Reads one whole multipart message (so a short or oversized one cannot swallow the next), checks its HMAC
         * signature in constant time, and parses it like jjava does.
         *
         * @throws SecurityException if the signature is bad or missing
         * @throws IllegalArgumentException if the frames do not form a Jupyter message
         */
        @Override
        @SuppressWarnings({"unchecked", "rawtypes"})
        public synchronized Message<?> readMessage() {
            if (closed) {
                return null;
            }
            List<byte[]> frames = new ArrayList<>();
            long bytes = 0;
            boolean tooBig = false;
            do {
                byte[] f = recv();
                if (f == null) {
                    break;
                }
                bytes += f.length;
                if (frames.size() < MAX_FRAMES && bytes <= MAX_BYTES) {
                    frames.add(f);
                } else {
                    tooBig = true;
                }
            } while (hasReceiveMore());
            if (tooBig) {
                throw new IllegalArgumentException("message with more than " + MAX_FRAMES + " frames or "
                        + MAX_BYTES + " bytes");
            }
            int d = -1;
            for (int i = 0; i < frames.size(); i++) {
                if (Arrays.equals(frames.get(i), DELIMITER)) {
                    d = i;
                    break;
                }
            }
            if (d < 0 || frames.size() < d + 6) {
                throw new IllegalArgumentException("malformed message: " + frames.size() + " frames"
                        + (d < 0 ? ", no <IDS|MSG> delimiter" : ", too few after the delimiter"));
            }
            byte[] header = frames.get(d + 2);
            byte[] parent = frames.get(d + 3);
            byte[] metadata = frames.get(d + 4);
            byte[] content = frames.get(d + 5);
            String expected = hmacGenerator.calculateSignature(header, parent, metadata, content);
            if (expected != null && !MessageDigest.isEqual(expected.getBytes(StandardCharsets.US_ASCII),
                    frames.get(d + 1))) {
                throw new SecurityException("message signature does not match the connection key");
            }
            Header<?> h = WIRE.fromJson(new String(header, StandardCharsets.UTF_8), Header.class);
            if (h == null || h.getType() == null) {
                throw new IllegalArgumentException("message without header or type");
            }
            JsonElement p = JsonParser.parseString(new String(parent, StandardCharsets.UTF_8));
            Header<?> parentHeader = p.isJsonObject() && !p.getAsJsonObject().isEmpty()
                    ? WIRE.fromJson(p, Header.class) : null;
            Map<String, Object> meta = WIRE.fromJson(new String(metadata, StandardCharsets.UTF_8), JSON_MAP);
            Object body = WIRE.fromJson(new String(content, StandardCharsets.UTF_8), h.getType().getContentType());
            return new Message(frames.subList(0, d), h, parentHeader, meta, body,
                    new ArrayList<>(frames.subList(d + 6, frames.size())));
        }

        @SuppressWarnings({"unchecked", "rawtypes"})
        void abortQueuedExecuteRequests() {
            if (poller == null || Thread.currentThread() != loop) {
                return;
            }
            // First take what is waiting now, then answer: a client reacting to the answers must not be aborted.
            List<Message<?>> waiting = new ArrayList<>();
            while (running && poller.poll(0) > 0 && waiting.size() < MAX_FRAMES) {
                try {
                    Message<?> message = readMessage();
                    if (message == null) {
                        break;
                    }
                    waiting.add(message);
                } catch (RuntimeException e) {
                    LOG.warning(name() + ": dropped an unreadable message (" + e.getMessage() + ")");
                }
            }
            for (Message<?> message : waiting) {
                if (MessageType.EXECUTE_REQUEST.equals(message.getHeader().getType())) {
                    ShellReplyEnvironment env = connection.prepareReplyEnv(this, message);
                    env.setBusyDeferIdle();
                    env.reply(new MapReply(MessageType.EXECUTE_REPLY, MessageType.EXECUTE_REQUEST,
                            Map.of("status", "aborted")));
                    env.resolveDeferrals();
                } else {
                    dispatch(message);
                }
            }
        }

        private String name() {
            return control ? "control" : "shell";
        }

        @SuppressWarnings({"unchecked", "rawtypes"})
        private void handleOne() {
            Message<?> message;
            try {
                message = readMessage();
            } catch (SecurityException e) {
                LOG.warning(name() + ": dropped a message with a bad or missing HMAC signature");
                return;
            } catch (RuntimeException e) {
                LOG.warning(name() + ": dropped an unreadable message (" + e.getMessage() + ")");
                return;
            }
            if (message == null) {
                return;
            }
            dispatch(message);
        }

        @SuppressWarnings({"unchecked", "rawtypes"})
        private void dispatch(Message<?> message) {
            ShellHandler handler = connection.getHandler(message.getHeader().getType());
            if (handler == null) {
                LOG.info(name() + ": no handler for message type " + message.getHeader().getType().getName());
                return;
            }
            ShellReplyEnvironment env = connection.prepareReplyEnv(this, message);
            try {
                handler.handle(env, message);
            } catch (Exception e) {
                LOG.log(Level.WARNING, name() + ": handling " + message.getHeader().getType().getName() + " failed", e);
            } finally {
                env.resolveDeferrals();
            }
            if (env.isMarkedForShutdown()) {
                running = false;
                Thread closer = new Thread(connection::close, "rungbook-shutdown");
                closer.setDaemon(true);
                closer.start();
            }
        }

        @Override
        public void close() {
            running = false;
            Thread t = loop;
            if (t != null && t != Thread.currentThread()) {
                try {
                    t.join(2000);
                } catch (InterruptedException e) {
                    Thread.currentThread().interrupt();
                }
            }
            super.close();
        }

        @Override
        public void waitUntilClose() {
            Thread t = loop;
            if (t != null && t != Thread.currentThread()) {
                try {
                    t.join();
                } catch (InterruptedException e) {
                    Thread.currentThread().interrupt();
                }
            }
        }
    }
}
