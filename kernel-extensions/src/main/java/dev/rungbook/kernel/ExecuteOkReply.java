package dev.rungbook.kernel;

import com.google.gson.annotations.SerializedName;
import java.util.List;
import java.util.Map;
import org.dflib.jjava.jupyter.messages.ContentType;
import org.dflib.jjava.jupyter.messages.MessageType;
import org.dflib.jjava.jupyter.messages.ReplyType;
import org.dflib.jjava.jupyter.messages.request.ExecuteRequest;

/** An {@code execute_reply} with status ok and, unlike jjava's, the {@code payload} list (used for the pager). */
final class ExecuteOkReply implements ContentType<ExecuteOkReply>, ReplyType<ExecuteRequest> {
    @SerializedName("status")
    private final String status = "ok";
    @SerializedName("execution_count")
    private final int executionCount;
    @SerializedName("user_expressions")
    private final Map<String, Object> userExpressions = Map.of();
    @SerializedName("payload")
    private final List<Map<String, Object>> payload;

    ExecuteOkReply(int executionCount, List<Map<String, Object>> payload) {
        this.executionCount = executionCount;
        this.payload = List.copyOf(payload);
    }

    /** A pager payload showing {@code text}. */
    static Map<String, Object> page(String text) {
        return Map.of("source", "page", "data", Map.of("text/plain", text), "start", 0);
    }

    @Override
    @SuppressWarnings({"unchecked", "rawtypes"})
    public MessageType<ExecuteOkReply> getType() {
        return (MessageType) MessageType.EXECUTE_REPLY;
    }

    @Override
    public MessageType<ExecuteRequest> getRequestType() {
        return MessageType.EXECUTE_REQUEST;
    }

    String status() {
        return status;
    }

    Map<String, Object> userExpressions() {
        return userExpressions;
    }
}
