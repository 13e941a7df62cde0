package dev.rungbook.render;

import java.util.Collections;
import java.util.LinkedHashMap;
import java.util.Map;

/**
 * One rendered value: data keyed by MIME type (e.g. {@code text/html}, {@code image/png} as base64) plus optional
 * metadata per type (e.g. image width). Immutable.
 */
public final class MimeBundle {
    private final Map<String, Object> data;
    private final Map<String, Object> metadata;

    private MimeBundle(Map<String, Object> data, Map<String, Object> metadata) {
        this.data = Collections.unmodifiableMap(new LinkedHashMap<>(data));
        this.metadata = Collections.unmodifiableMap(new LinkedHashMap<>(metadata));
    }

    /** A bundle with only {@code text/plain}. */
    public static MimeBundle text(String text) {
        return new MimeBundle(Map.of(TEXT, text), Map.of());
    }

    /** {@code text/html} with a {@code text/plain} fallback. */
    public static MimeBundle html(String html, String text) {
        Map<String, Object> d = new LinkedHashMap<>();
        d.put(TEXT, text);
        d.put(HTML, html);
        return new MimeBundle(d, Map.of());
    }

    /** This bundle with {@code mime -> value} added (replacing an existing entry). */
    public MimeBundle with(String mime, Object value) {
        Map<String, Object> d = new LinkedHashMap<>(data);
        d.put(mime, value);
        return new MimeBundle(d, metadata);
    }

    /** This bundle with metadata for {@code mime} added. */
    public MimeBundle withMetadata(String mime, Object value) {
        Map<String, Object> m = new LinkedHashMap<>(metadata);
        m.put(mime, value);
        return new MimeBundle(data, m);
    }

    /** The data by MIME type (unmodifiable, in insertion order). */
    public Map<String, Object> data() {
        return data;
    }

    /** The metadata by MIME type (unmodifiable). */
    public Map<String, Object> metadata() {
        return metadata;
    }

    /** The {@code text/plain} entry, or an empty string. */
    public String plainText() {
        Object t = data.get(TEXT);
        return t == null ? "" : t.toString();
    }

    /** {@code text/plain}. */
    public static final String TEXT = "text/plain";
    /** {@code text/html}. */
    public static final String HTML = "text/html";
    /** {@code image/png} (base64 data). */
    public static final String PNG = "image/png";
    /** {@code image/svg+xml}. */
    public static final String SVG = "image/svg+xml";

    @Override
    public String toString() {
        return "MimeBundle" + data.keySet();
    }
}
