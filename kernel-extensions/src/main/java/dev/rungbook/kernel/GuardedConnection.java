package dev.rungbook.kernel;

import java.security.InvalidKeyException;
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
 * loop dies on the exception a bad or missing signature raises, which would leave the kernel deaf; here such a
 * message is dropped with a log line and the loop goes on. All sockets bind only to the transport, address and
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
        private final boolean control;
        private final GuardedConnection connection;
        private volatile boolean running;
        private Thread loop;

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
                LOG.warning(name() + ": dropped an unreadable message (" + e + ")");
                return;
            }
            if (message == null) {
                return;
            }
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
