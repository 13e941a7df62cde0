package dev.rungbook.io;

import java.nio.ByteBuffer;
import java.nio.charset.CharacterCodingException;
import java.nio.charset.CharsetDecoder;
import java.nio.charset.CodingErrorAction;
import java.nio.charset.StandardCharsets;
import java.nio.file.Path;

/** Strict text decoding and a nesting pre-scan for untrusted JSON headers. */
final class Text {
    /** Deepest JSON nesting accepted; checkpoint headers need three levels. */
    static final int MAX_JSON_DEPTH = 64;

    private Text() {
    }

    /** Decodes UTF-8, refusing malformed or unmappable input instead of replacing it. */
    static String utf8(byte[] bytes, Path file, String what) {
        CharsetDecoder dec = StandardCharsets.UTF_8.newDecoder()
                .onMalformedInput(CodingErrorAction.REPORT)
                .onUnmappableCharacter(CodingErrorAction.REPORT);
        ByteBuffer in = ByteBuffer.wrap(bytes);
        try {
            return dec.decode(in).toString();
        } catch (CharacterCodingException e) {
            throw new CheckpointFormatException(file, null, what + " is not valid UTF-8 (bad byte sequence near byte "
                    + in.position() + ")");
        }
    }

    /**
     * Refuses JSON nested deeper than {@link #MAX_JSON_DEPTH} before it is parsed, so that no parser recursion or
     * large stack can be provoked. Brackets inside strings are skipped.
     */
    static void checkJsonDepth(String json, Path file, String what) {
        int depth = 0;
        boolean inString = false;
        for (int i = 0, n = json.length(); i < n; i++) {
            char c = json.charAt(i);
            if (inString) {
                if (c == '\\') {
                    i++;
                } else if (c == '"') {
                    inString = false;
                }
            } else if (c == '"') {
                inString = true;
            } else if (c == '{' || c == '[') {
                if (++depth > MAX_JSON_DEPTH) {
                    throw new CheckpointFormatException(file, null, what + " nests JSON deeper than "
                            + MAX_JSON_DEPTH + " levels (at character " + i + ")");
                }
            } else if (c == '}' || c == ']') {
                depth--;
            }
        }
    }
}
