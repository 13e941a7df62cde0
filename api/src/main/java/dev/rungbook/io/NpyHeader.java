package dev.rungbook.io;

import dev.rungbook.tensor.DType;
import java.io.ByteArrayOutputStream;
import java.nio.ByteOrder;
import java.nio.charset.StandardCharsets;
import java.nio.file.Path;
import java.util.ArrayList;
import java.util.List;

/**
 * The header of a NumPy {@code .npy} array: magic {@code \x93NUMPY}, major and minor version (1.0, 2.0 or 3.0), a
 * little-endian header length (2 bytes in version 1, 4 bytes later), then a Python dict literal with exactly the keys
 * {@code descr}, {@code fortran_order} and {@code shape}, padded with spaces and ending in a newline. Version 3 allows
 * UTF-8 in the header; versions 1 and 2 are Latin-1. The dict is parsed by a small fixed grammar, never evaluated.
 */
final class NpyHeader {
    static final byte[] MAGIC = {(byte) 0x93, 'N', 'U', 'M', 'P', 'Y'};
    /** Largest header text accepted: 1 MiB (NumPy's own headers are well under 1 KiB). */
    static final long HEADER_LIMIT = 1L << 20;
    /** Header and data start at a multiple of this (NumPy's current alignment). */
    static final int ALIGN = 64;

    final DType dtype;
    final ByteOrder order;
    final boolean fortran;
    final long[] shape;
    /** Bytes from the start of the .npy data to its first element. */
    final long dataOffset;

    private NpyHeader(DType dtype, ByteOrder order, boolean fortran, long[] shape, long dataOffset) {
        this.dtype = dtype;
        this.order = order;
        this.fortran = fortran;
        this.shape = shape;
        this.dataOffset = dataOffset;
    }

    /** Reads bytes of the .npy data; returns fewer than asked only at its end. */
    interface Source {
        byte[] read(int offset, int length) throws java.io.IOException;
    }

    /**
     * Parses the header. {@code available} is the number of bytes the .npy data can hold (for a file, its size), used to
     * refuse a header length beyond it before anything is allocated.
     */
    static NpyHeader read(Path file, String tensor, Source src, long available) throws java.io.IOException {
        byte[] pre = src.read(0, 8);
        if (pre.length < 8) {
            throw new CheckpointFormatException(file, tensor, "truncated: " + pre.length
                    + " bytes, too short for the 10-byte .npy preamble");
        }
        for (int i = 0; i < MAGIC.length; i++) {
            if (pre[i] != MAGIC[i]) {
                throw new CheckpointFormatException(file, tensor, "not a .npy array: missing the \\x93NUMPY magic");
            }
        }
        int major = pre[6] & 0xFF;
        int minor = pre[7] & 0xFF;
        if (major < 1 || major > 3 || minor != 0) {
            throw new CheckpointFormatException(file, tensor, "unsupported .npy format version " + major + "."
                    + minor + " (supported: 1.0, 2.0, 3.0)");
        }
        int lenBytes = major == 1 ? 2 : 4;
        byte[] lb = src.read(8, lenBytes);
        if (lb.length < lenBytes) {
            throw new CheckpointFormatException(file, tensor, "truncated: the .npy header length field is cut off");
        }
        long hlen = (lb[0] & 0xFF) | (lb[1] & 0xFF) << 8;
        if (lenBytes == 4) {
            hlen |= (long) (lb[2] & 0xFF) << 16 | (long) (lb[3] & 0xFF) << 24;
        }
        long start = 8 + lenBytes;
        if (hlen > HEADER_LIMIT) {
            throw new CheckpointFormatException(file, tensor, ".npy header length " + hlen
                    + " bytes exceeds the limit of " + HEADER_LIMIT + " bytes");
        }
        if (start + hlen > available) {
            throw new CheckpointFormatException(file, tensor, ".npy header length " + hlen
                    + " bytes runs beyond the end of the data (" + available + " bytes): truncated or corrupt");
        }
        byte[] hb = src.read((int) start, (int) hlen);
        if (hb.length < hlen) {
            throw new CheckpointFormatException(file, tensor, "truncated: the .npy header ends after " + hb.length
                    + " of " + hlen + " bytes");
        }
        String text = major == 3 ? Text.utf8(hb, file, ".npy header") : new String(hb, StandardCharsets.ISO_8859_1);
        return parse(file, tensor, text, start + hlen);
    }

    private static NpyHeader parse(Path file, String tensor, String text, long dataOffset) {
        Lexer lx = new Lexer(file, tensor, text);
        String descr = null;
        Boolean fortran = null;
        long[] shape = null;
        lx.expect('{');
        while (!lx.peekIs('}')) {
            String key = lx.string("a key");
            lx.expect(':');
            switch (key) {
                case "descr":
                    if (descr != null) {
                        throw lx.error("duplicate key 'descr'");
                    }
                    if (lx.peekIs('[')) {
                        throw lx.error("structured dtypes (a field list in 'descr') are not supported");
                    }
                    descr = lx.string("the 'descr' string");
                    break;
                case "fortran_order":
                    if (fortran != null) {
                        throw lx.error("duplicate key 'fortran_order'");
                    }
                    fortran = lx.bool();
                    break;
                case "shape":
                    if (shape != null) {
                        throw lx.error("duplicate key 'shape'");
                    }
                    shape = lx.tuple();
                    break;
                default:
                    throw lx.error("unexpected key '" + key + "' (expected descr, fortran_order, shape)");
            }
            if (!lx.peekIs('}')) {
                lx.expect(',');
            }
        }
        lx.expect('}');
        lx.end();
        if (descr == null || fortran == null || shape == null) {
            throw lx.error("header lacks '" + (descr == null ? "descr" : fortran == null ? "fortran_order" : "shape")
                    + "'");
        }
        ByteOrder[] order = new ByteOrder[1];
        DType dtype = dtype(file, tensor, descr, order);
        return new NpyHeader(dtype, order[0], fortran, shape, dataOffset);
    }

    private static DType dtype(Path file, String tensor, String descr, ByteOrder[] order) {
        if (descr.startsWith("O") || descr.length() > 1 && descr.charAt(1) == 'O') {
            throw new CheckpointFormatException(file, tensor, "object arrays (dtype '" + descr
                    + "') need unpickling, which Rungbook refuses");
        }
        char o = descr.isEmpty() ? '?' : descr.charAt(0);
        String code = o == '<' || o == '>' || o == '|' || o == '=' ? descr.substring(1) : descr;
        DType t = DType.fromNumpyCode(code).orElseThrow(() -> new CheckpointFormatException(file, tensor,
                "unsupported dtype '" + descr + "' (supported: f8 f4 f2 i8 i4 i2 i1 u1 b1)"));
        if (t.byteSize() > 1 && o != '<' && o != '>') {
            throw new CheckpointFormatException(file, tensor, "dtype '" + descr
                    + "' does not say its byte order ('<' or '>')");
        }
        order[0] = o == '>' ? ByteOrder.BIG_ENDIAN : ByteOrder.LITTLE_ENDIAN;
        return t;
    }

    /** Tokens of the Python literal subset NumPy writes. */
    private static final class Lexer {
        private final Path file;
        private final String tensor;
        private final String s;
        private int i;

        Lexer(Path file, String tensor, String s) {
            this.file = file;
            this.tensor = tensor;
            this.s = s;
        }

        CheckpointFormatException error(String problem) {
            return new CheckpointFormatException(file, tensor, "invalid .npy header: " + problem + " (at character "
                    + i + " of " + quote(s) + ")");
        }

        private static String quote(String s) {
            String t = s.strip();
            return "\"" + (t.length() > 120 ? t.substring(0, 120) + "..." : t) + "\"";
        }

        private void skipSpace() {
            while (i < s.length() && (s.charAt(i) == ' ' || s.charAt(i) == '\n' || s.charAt(i) == '\t'
                    || s.charAt(i) == '\r')) {
                i++;
            }
        }

        boolean peekIs(char c) {
            skipSpace();
            return i < s.length() && s.charAt(i) == c;
        }

        void expect(char c) {
            if (!peekIs(c)) {
                throw error("expected '" + c + "'");
            }
            i++;
        }

        void end() {
            skipSpace();
            if (i != s.length()) {
                throw error("text after the dict");
            }
        }

        String string(String what) {
            skipSpace();
            if (i >= s.length() || (s.charAt(i) != '\'' && s.charAt(i) != '"')) {
                throw error("expected " + what);
            }
            char q = s.charAt(i++);
            int startAt = i;
            while (i < s.length() && s.charAt(i) != q) {
                if (s.charAt(i) == '\\') {
                    throw error("escapes in strings are not supported");
                }
                i++;
            }
            if (i >= s.length()) {
                throw error("unterminated string");
            }
            return s.substring(startAt, i++);
        }

        boolean bool() {
            skipSpace();
            if (s.startsWith("True", i)) {
                i += 4;
                return true;
            }
            if (s.startsWith("False", i)) {
                i += 5;
                return false;
            }
            throw error("expected True or False for 'fortran_order'");
        }

        long[] tuple() {
            expect('(');
            List<Long> dims = new ArrayList<>();
            while (!peekIs(')')) {
                int startAt = i;
                if (i < s.length() && s.charAt(i) == '-') {
                    i++;
                }
                while (i < s.length() && Character.isDigit(s.charAt(i)) && s.charAt(i) < 128) {
                    i++;
                }
                String digits = s.substring(startAt, i);
                if (i < s.length() && (s.charAt(i) == 'L' || s.charAt(i) == 'l')) {
                    i++; // Python 2 long suffix
                }
                if (digits.isEmpty() || digits.equals("-")) {
                    throw error("expected an integer dimension in 'shape'");
                }
                if (digits.startsWith("-")) {
                    throw new CheckpointFormatException(file, tensor, "negative dimension " + digits + " in shape");
                }
                try {
                    dims.add(Long.parseLong(digits));
                } catch (NumberFormatException e) {
                    throw new CheckpointFormatException(file, tensor, "dimension " + digits
                            + " in shape overflows a 64-bit integer");
                }
                if (dims.size() > 1024) {
                    throw error("shape has more than 1024 dimensions");
                }
                if (!peekIs(')')) {
                    expect(',');
                }
            }
            expect(')');
            return dims.stream().mapToLong(Long::longValue).toArray();
        }
    }

    /** The header bytes (preamble included) NumPy would write: version 1.0, or 2.0 when the text needs it. */
    static byte[] format(DType dtype, int[] shape) {
        String descr = (dtype.byteSize() == 1 ? "|" : "<") + dtype.numpyCode().orElseThrow();
        StringBuilder sb = new StringBuilder("{'descr': '").append(descr).append("', 'fortran_order': False, 'shape': (");
        for (int k = 0; k < shape.length; k++) {
            sb.append(shape[k]).append(shape.length == 1 ? "," : k + 1 < shape.length ? ", " : "");
        }
        sb.append("), }");
        byte[] dict = sb.toString().getBytes(StandardCharsets.ISO_8859_1);
        int pre = 10;
        int total = pad(pre + dict.length + 1);
        int major = 1;
        if (total - pre > 0xFFFF) {
            pre = 12;
            total = pad(pre + dict.length + 1);
            major = 2;
        }
        ByteArrayOutputStream out = new ByteArrayOutputStream(total);
        out.writeBytes(MAGIC);
        out.write(major);
        out.write(0);
        int hlen = total - pre;
        out.write(hlen & 0xFF);
        out.write(hlen >>> 8 & 0xFF);
        if (major == 2) {
            out.write(hlen >>> 16 & 0xFF);
            out.write(hlen >>> 24 & 0xFF);
        }
        out.writeBytes(dict);
        for (int k = pre + dict.length; k < total - 1; k++) {
            out.write(' ');
        }
        out.write('\n');
        return out.toByteArray();
    }

    private static int pad(int n) {
        return (n + ALIGN - 1) / ALIGN * ALIGN;
    }
}
