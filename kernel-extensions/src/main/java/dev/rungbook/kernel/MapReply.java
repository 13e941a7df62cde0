package dev.rungbook.kernel;

import java.util.LinkedHashMap;
import java.util.Map;
import org.dflib.jjava.jupyter.messages.ContentType;
import org.dflib.jjava.jupyter.messages.MessageType;
import org.dflib.jjava.jupyter.messages.ReplyType;

/**
 * A reply whose content is given as a map (serialized as a JSON object) and always carries {@code status: ok}; used
 * where jjava's reply classes lack fields the protocol requires (the status of kernel_info and history replies).
 */
final class MapReply extends LinkedHashMap<String, Object> implements ContentType<MapReply>, ReplyType<Object> {
    private static final long serialVersionUID = 1L;
    private final transient MessageType<?> type;
    private final transient MessageType<?> requestType;

    MapReply(MessageType<?> type, MessageType<?> requestType, Map<String, Object> content) {
        this.type = type;
        this.requestType = requestType;
        put("status", "ok");
        putAll(content);
    }

    @Override
    @SuppressWarnings("unchecked")
    public MessageType<MapReply> getType() {
        return (MessageType<MapReply>) type;
    }

    @Override
    @SuppressWarnings("unchecked")
    public MessageType<Object> getRequestType() {
        return (MessageType<Object>) requestType;
    }
}
