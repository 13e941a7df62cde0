package dev.rungbook.io;

import static dev.rungbook.io.IoFixtures.assertRefused;
import static dev.rungbook.io.IoFixtures.f32;
import static dev.rungbook.io.IoFixtures.safetensors;
import static org.junit.jupiter.api.Assertions.assertEquals;
import static org.junit.jupiter.api.Assertions.assertThrows;
import static org.junit.jupiter.api.Assertions.assertTrue;

import java.io.ByteArrayOutputStream;
import java.io.IOException;
import java.io.UncheckedIOException;
import java.nio.ByteBuffer;
import java.nio.ByteOrder;
import java.nio.charset.StandardCharsets;
import java.nio.file.Files;
import java.nio.file.Path;
import java.util.Arrays;
import java.util.zip.ZipEntry;
import java.util.zip.ZipOutputStream;
import org.junit.jupiter.api.BeforeEach;
import org.junit.jupiter.api.Test;

/** Malformed and hostile files: each must give a {@link CheckpointFormatException} naming file, tensor and problem. */
class HostileInputTest {
    private static final String ONE = "{\"w\":{\"dtype\":\"F32\",\"shape\":[2],\"data_offsets\":[0,8]}}";
    private Path dir;

    @BeforeEach
    void setUp() throws IOException {
        dir = IoFixtures.tempDir();
    }

    private Path st(String header, byte[] data) throws IOException {
        return IoFixtures.write(dir, "t.safetensors", safetensors(header, data));
    }

    private Path stLength(long declared, byte[] rest) throws IOException {
        ByteBuffer b = ByteBuffer.allocate(8 + rest.length).order(ByteOrder.LITTLE_ENDIAN);
        b.putLong(declared).put(rest);
        return IoFixtures.write(dir, "t.safetensors", b.array());
    }

    private static String tensor(String name, String dtype, String shape, long begin, long end) {
        return "\"" + name + "\":{\"dtype\":\"" + dtype + "\",\"shape\":" + shape + ",\"data_offsets\":[" + begin
                + "," + end + "]}";
    }

    // ---- safetensors -------------------------------------------------------------------------------------------

    @Test
    void rejectsFileTooShortForTheHeaderLength() throws IOException {
        assertRefused(IoFixtures.write(dir, "t.safetensors", new byte[5]), "truncated", "5 bytes");
    }

    @Test
    void rejectsEmptyFile() throws IOException {
        assertRefused(IoFixtures.write(dir, "t.safetensors", new byte[0]), "truncated", "0 bytes");
    }

    @Test
    void rejectsHeaderLengthBeyondTheFile() throws IOException {
        assertRefused(stLength(1000, "{\"a\":1}".getBytes(StandardCharsets.UTF_8)), "header length 1000",
                "beyond the end of the file");
    }

    @Test
    void rejectsHeaderOverTheLimitBeforeAllocating() throws IOException {
        // assertRefused also checks that the refusal allocates well under the declared 200 MiB.
        assertRefused(stLength(200L << 20, "{}".getBytes(StandardCharsets.UTF_8)), "header length 209715200",
                "exceeds the limit");
    }

    @Test
    void rejectsMaximalAndNegativeHeaderLengths() throws IOException {
        assertRefused(stLength(Long.MAX_VALUE, new byte[16]), "9223372036854775807", "exceeds the limit");
        assertRefused(stLength(-1, new byte[16]), "18446744073709551615", "exceeds the limit");
        assertRefused(stLength(0, new byte[16]), "header length 0", "too short");
    }

    @Test
    void rejectsInvalidUtf8InTheHeader() throws IOException {
        byte[] h = "{\"w\u00ff\":{\"dtype\":\"F32\",\"shape\":[0],\"data_offsets\":[0,0]}}"
                .getBytes(StandardCharsets.ISO_8859_1);
        assertRefused(IoFixtures.write(dir, "t.safetensors", IoFixtures.safetensorsRaw(h, new byte[0])),
                "not valid utf-8");
        byte[] overlong = {'{', '"', (byte) 0xC0, (byte) 0xAF, '"', ':', '1', '}'}; // overlong '/'
        assertRefused(IoFixtures.write(dir, "t.safetensors", IoFixtures.safetensorsRaw(overlong, new byte[0])),
                "not valid utf-8");
    }

    @Test
    void rejectsInvalidJson() throws IOException {
        assertRefused(st("{\"w\":{\"dtype\":\"F32\",\"shape\":[2],", new byte[0]), "invalid json");
        assertRefused(st("{\"w\":{\"dtype\":F32,\"shape\":[2],\"data_offsets\":[0,8]}}", f32(1, 2)),
                "invalid json", "tensor 'w'");
        assertRefused(st(ONE + " trailing", f32(1, 2)), "invalid json");
        assertRefused(st("[1,2]   ", new byte[0]), "does not start with '{'");
        assertRefused(st("{\"w\":[1]}", new byte[0]), "tensor 'w'", "expected an object");
    }

    @Test
    void rejectsDeeplyNestedJsonWithoutRecursing() throws IOException {
        String deep = "{\"__metadata__\":" + "[".repeat(200_000) + "]".repeat(200_000) + "}";
        assertRefused(st(deep, new byte[0]), "deeper than 64 levels");
        // brackets inside strings do not count
        String inString = "{\"__metadata__\":{\"k\":\"" + "[".repeat(1000) + "\"}}";
        try (Checkpoint c = Checkpoint.open(st(inString, new byte[0]))) {
            assertEquals(1000, c.metadata().get("k").length());
        }
    }

    @Test
    void rejectsUnknownDtype() throws IOException {
        CheckpointFormatException e = assertRefused(st("{" + tensor("w", "U32", "[2]", 0, 4) + "}", new byte[4]),
                "tensor 'w'", "unknown dtype 'U32'", "supported: F64");
        assertEquals("w", e.tensor().orElseThrow());
        assertRefused(st("{" + tensor("w", "f32", "[2]", 0, 8) + "}", new byte[8]), "unknown dtype 'f32'");
    }

    @Test
    void rejectsOffsetsBeyondTheData() throws IOException {
        assertRefused(st("{" + tensor("w", "F32", "[4]", 0, 16) + "}", f32(1, 2)), "tensor 'w'",
                "[0, 16]", "beyond the end of the data section (8 bytes)");
    }

    @Test
    void rejectsTruncatedData() throws IOException {
        byte[] full = safetensors(ONE, f32(1, 2));
        assertRefused(IoFixtures.write(dir, "t.safetensors", Arrays.copyOf(full, full.length - 1)), "tensor 'w'",
                "truncated");
    }

    @Test
    void rejectsOverlappingData() throws IOException {
        assertRefused(st("{" + tensor("a", "F32", "[2]", 0, 8) + "," + tensor("b", "F32", "[2]", 4, 12) + "}",
                new byte[12]), "tensor 'b'", "overlap", "tensor 'a'");
    }

    @Test
    void rejectsMisorderedOffsets() throws IOException {
        assertRefused(st("{" + tensor("w", "F32", "[0]", 8, 0) + "}", new byte[8]), "tensor 'w'", "misordered");
    }

    @Test
    void rejectsGapsAndTrailingBytes() throws IOException {
        assertRefused(st("{" + tensor("a", "F32", "[1]", 0, 4) + "," + tensor("b", "F32", "[1]", 8, 12) + "}",
                new byte[12]), "tensor 'b'", "4 unused bytes");
        assertRefused(st(ONE, new byte[12]), "4 trailing bytes");
    }

    @Test
    void rejectsShapeSizeMismatch() throws IOException {
        assertRefused(st("{" + tensor("w", "F32", "[3]", 0, 8) + "}", new byte[8]), "tensor 'w'", "needs 12 bytes",
                "span 8");
        assertRefused(st("{" + tensor("w", "BF16", "[2,2]", 0, 16) + "}", new byte[16]), "needs 8 bytes");
    }

    @Test
    void rejectsNegativeAndOverflowingDimensions() throws IOException {
        assertRefused(st("{" + tensor("w", "F32", "[-1,2]", 0, 0) + "}", new byte[0]), "tensor 'w'",
                "negative dimension -1");
        assertRefused(st("{" + tensor("w", "F32", "[4294967296,4294967296,4]", 0, 0) + "}", new byte[0]),
                "tensor 'w'", "overflows", "element count");
        assertRefused(st("{" + tensor("w", "F64", "[4611686018427387904]", 0, 0) + "}", new byte[0]),
                "overflows", "byte size");
        assertRefused(st("{" + tensor("w", "F32", "[99999999999999999999]", 0, 0) + "}", new byte[0]),
                "overflows a 64-bit integer");
        assertRefused(st("{" + tensor("w", "F32", "[1.5]", 0, 4) + "}", new byte[4]), "non-negative integer");
        assertRefused(st("{" + tensor("w", "F32", "[1]", -4, 0) + "}", new byte[4]), "negative offset");
    }

    @Test
    void refusesToLoadADimensionTooLargeForATensor() throws IOException {
        // Zero elements, but a dimension no Java int holds: listed, described, refused on load.
        try (Checkpoint c = Checkpoint.open(st("{" + tensor("w", "F32", "[0,3000000000]", 0, 0) + "}", new byte[0]))) {
            assertEquals(0, c.info("w").elementCount());
            CheckpointFormatException e = assertThrows(CheckpointFormatException.class, () -> c.tensor("w"));
            assertTrue(e.getMessage().contains("tensor 'w'") && e.getMessage().contains("2^31-1"), e.getMessage());
        }
    }

    @Test
    void rejectsDuplicateNames() throws IOException {
        assertRefused(st("{" + tensor("w", "F32", "[1]", 0, 4) + "," + tensor("w", "F32", "[1]", 4, 8) + "}",
                new byte[8]), "tensor 'w'", "duplicate tensor name");
        assertRefused(st("{\"__metadata__\":{},\"__metadata__\":{}}", new byte[0]), "duplicate __metadata__");
        assertRefused(st("{\"__metadata__\":{\"k\":\"1\",\"k\":\"2\"}}", new byte[0]), "duplicate key 'k'");
        assertRefused(st("{\"w\":{\"dtype\":\"F32\",\"dtype\":\"F32\",\"shape\":[0],\"data_offsets\":[0,0]}}",
                new byte[0]), "duplicate key 'dtype'");
    }

    @Test
    void rejectsMalformedEntriesAndMetadata() throws IOException {
        assertRefused(st("{\"__metadata__\":{\"n\":3}}", new byte[0]), "value of 'n'", "expected a string");
        assertRefused(st("{\"w\":{\"dtype\":\"F32\",\"shape\":[0]}}", new byte[0]), "tensor 'w'",
                "lacks data_offsets");
        assertRefused(st("{\"w\":{\"dtype\":\"F32\",\"shape\":[0],\"data_offsets\":[0,0],\"x\":1}}", new byte[0]),
                "unexpected key 'x'");
        assertRefused(st("{\"w\":{\"dtype\":\"F32\",\"shape\":[0],\"data_offsets\":[0]}}", new byte[0]),
                "data_offsets has 1 entries, expected 2");
    }

    @Test
    void everyTruncationOfAValidFileIsRefused() throws IOException {
        byte[] st = safetensors(ONE + "  ", f32(1, 2));
        byte[] npy = Files.readAllBytes(IoFixtures.golden("le_f8.npy"));
        byte[] npz = Files.readAllBytes(IoFixtures.golden("deflated.npz"));
        String[][] cases = {{"t.safetensors"}, {"t.npy"}, {"t.npz"}};
        byte[][] contents = {st, npy, npz};
        for (int k = 0; k < cases.length; k++) {
            for (int len = 0; len < contents[k].length; len++) {
                Path p = IoFixtures.write(dir, cases[k][0], Arrays.copyOf(contents[k], len));
                assertRefused(p);
            }
        }
    }

    @Test
    void randomlyCorruptedFilesAreReadOrRefusedCleanly() throws IOException {
        // A seeded mutation sweep (a fixed stand-in for fuzzing): 1-4 random bytes of a valid file are overwritten;
        // the reader must either load every tensor or throw CheckpointFormatException, never anything else.
        byte[] st = safetensors("{\"__metadata__\":{\"k\":\"v\"}," + tensor("a", "F16", "[2,2]", 0, 8) + ","
                + tensor("b", "I32", "[3]", 8, 20) + "}", new byte[20]);
        String[] names = {"t.safetensors", "t.npy", "t.npy", "t.npz", "t.npz"};
        byte[][] bases = {st, Files.readAllBytes(IoFixtures.golden("fortran_234_be.npy")),
            Files.readAllBytes(IoFixtures.golden("v3_f2_be.npy")), Files.readAllBytes(IoFixtures.golden("stored.npz")),
            Files.readAllBytes(IoFixtures.golden("deflated.npz"))};
        java.util.Random rnd = dev.rungbook.testing.Fixtures.random(99);
        int refused = 0;
        for (int k = 0; k < bases.length; k++) {
            for (int trial = 0; trial < 300; trial++) {
                byte[] m = bases[k].clone();
                for (int j = rnd.nextInt(4); j >= 0; j--) {
                    m[rnd.nextInt(m.length)] = (byte) rnd.nextInt(256);
                }
                Path p = IoFixtures.write(dir, names[k], m);
                try (Checkpoint c = Checkpoint.open(p)) {
                    for (String n : c.names()) {
                        c.tensor(n).toFloatArray();
                    }
                } catch (CheckpointFormatException e) {
                    refused++;
                    assertTrue(e.getMessage().startsWith(p + ": "), e.getMessage());
                } catch (RuntimeException | Error e) {
                    throw new AssertionError(names[k] + " trial " + trial + ": " + e, e);
                }
            }
        }
        assertTrue(refused > 100, "the sweep reached the checks: " + refused + " refusals");
    }

    // ---- sharded index -----------------------------------------------------------------------------------------

    @Test
    void rejectsMissingShard() throws IOException {
        IoFixtures.write(dir, "s1.safetensors", safetensors(ONE, f32(1, 2)));
        Path index = IoFixtures.write(dir, "m.safetensors.index.json",
                "{\"weight_map\":{\"w\":\"s1.safetensors\",\"v\":\"s2.safetensors\"}}".getBytes(StandardCharsets.UTF_8));
        assertRefused(index, "tensor 'v'", "missing shard 's2.safetensors'");
    }

    @Test
    void rejectsShardNamesOutsideTheFolder() throws IOException {
        Path index = IoFixtures.write(dir, "m.safetensors.index.json",
                "{\"weight_map\":{\"w\":\"../s1.safetensors\"}}".getBytes(StandardCharsets.UTF_8));
        assertRefused(index, "tensor 'w'", "not a plain file name");
    }

    @Test
    void rejectsIndexEntriesTheShardLacks() throws IOException {
        Path shard = IoFixtures.write(dir, "s1.safetensors", safetensors(ONE, f32(1, 2)));
        Path index = IoFixtures.write(dir, "m.safetensors.index.json",
                "{\"weight_map\":{\"w\":\"s1.safetensors\",\"q\":\"s1.safetensors\"}}".getBytes(StandardCharsets.UTF_8));
        CheckpointFormatException e = assertThrows(CheckpointFormatException.class, () -> Checkpoint.open(index));
        assertEquals(shard.toAbsolutePath(), e.file().toAbsolutePath());
        assertTrue(e.getMessage().contains("tensor 'q'") && e.getMessage().contains("does not hold it"),
                e.getMessage());
    }

    @Test
    void rejectsMalformedIndex() throws IOException {
        Path noMap = IoFixtures.write(dir, "m.safetensors.index.json", "{\"metadata\":{}}".getBytes(StandardCharsets.UTF_8));
        assertRefused(noMap, "no weight_map");
        Path dup = IoFixtures.write(dir, "m.safetensors.index.json",
                "{\"weight_map\":{\"w\":\"a\",\"w\":\"b\"}}".getBytes(StandardCharsets.UTF_8));
        assertRefused(dup, "tensor 'w'", "duplicate tensor name");
        Path bad = IoFixtures.write(dir, "m.safetensors.index.json", "{\"weight_map\":{".getBytes(StandardCharsets.UTF_8));
        assertRefused(bad, "invalid json");
        Path deep = IoFixtures.write(dir, "m.safetensors.index.json",
                ("{\"x\":" + "[".repeat(100_000) + "]".repeat(100_000) + "}").getBytes(StandardCharsets.UTF_8));
        assertRefused(deep, "deeper than 64");
    }

    // ---- .npy --------------------------------------------------------------------------------------------------

    /** A .npy file with the given version, header text (padded as given) and data. */
    private static byte[] npy(int major, String dict, byte[] data) {
        byte[] h = dict.getBytes(StandardCharsets.ISO_8859_1);
        ByteBuffer b = ByteBuffer.allocate(12 + h.length + data.length).order(ByteOrder.LITTLE_ENDIAN);
        b.put(NpyHeader.MAGIC).put((byte) major).put((byte) 0);
        if (major == 1) {
            b.putShort((short) h.length);
        } else {
            b.putInt(h.length);
        }
        b.put(h).put(data);
        return Arrays.copyOf(b.array(), b.position());
    }

    private Path npyFile(String dict, byte[] data) throws IOException {
        return IoFixtures.write(dir, "arr.npy", npy(1, dict, data));
    }

    private static String dict(String descr, String fortran, String shape) {
        return "{'descr': '" + descr + "', 'fortran_order': " + fortran + ", 'shape': " + shape + ", }\n";
    }

    @Test
    void npyRejectsBadMagicAndVersion() throws IOException {
        assertRefused(IoFixtures.write(dir, "arr.npy", "\u0093NUMPX\u0001\u0000".getBytes(StandardCharsets.ISO_8859_1)),
                "missing the \\x93NUMPY magic");
        assertRefused(IoFixtures.write(dir, "arr.npy", npy(4, dict("<f4", "False", "(1,)"), f32(1))),
                "tensor 'arr'", "version 4.0");
    }

    @Test
    void npyRejectsHeaderLengthBeyondTheFileOrOverTheLimit() throws IOException {
        byte[] f = npy(1, dict("<f4", "False", "(1,)"), f32(1));
        ByteBuffer.wrap(f).order(ByteOrder.LITTLE_ENDIAN).putShort(8, (short) 0xFFFF);
        assertRefused(IoFixtures.write(dir, "arr.npy", f), "header length 65535", "beyond the end");
        byte[] g = npy(2, dict("<f4", "False", "(1,)"), f32(1));
        ByteBuffer.wrap(g).order(ByteOrder.LITTLE_ENDIAN).putInt(8, -1);
        assertRefused(IoFixtures.write(dir, "arr.npy", g), "header length 4294967295", "exceeds the limit");
    }

    @Test
    void npyRejectsUnsupportedDtypes() throws IOException {
        assertRefused(npyFile(dict("<c8", "False", "(1,)"), new byte[8]), "tensor 'arr'", "unsupported dtype '<c8'");
        assertRefused(npyFile(dict("|O", "False", "(1,)"), new byte[8]), "object arrays", "unpickling");
        assertRefused(npyFile(dict("f4", "False", "(1,)"), new byte[4]), "byte order");
        assertRefused(npyFile("{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (1,), }\n", new byte[4]),
                "structured dtypes");
        assertRefused(npyFile(dict("<U3", "False", "(1,)"), new byte[12]), "unsupported dtype '<U3'");
    }

    @Test
    void npyRejectsMalformedHeaders() throws IOException {
        assertRefused(npyFile("{'descr': '<f4', 'fortran_order': False}\n", f32(1)), "lacks 'shape'");
        assertRefused(npyFile("{'descr': '<f4', 'fortran_order': False, 'shape': (1,), 'x': 1}\n", f32(1)),
                "unexpected key 'x'");
        assertRefused(npyFile("{'descr': '<f4', 'fortran_order': maybe, 'shape': (1,)}\n", f32(1)),
                "expected true or false");
        assertRefused(npyFile("{'descr': '<f4', 'fortran_order': False, 'shape': (1,)} extra\n", f32(1)),
                "text after the dict");
        assertRefused(npyFile("__import__('os').system('echo no')\n", f32(1)), "invalid .npy header");
        assertRefused(npyFile("{'descr': '<f4', 'descr': '<f4', 'fortran_order': False, 'shape': (1,)}\n", f32(1)),
                "duplicate key 'descr'");
    }

    @Test
    void npyRejectsNegativeAndOverflowingDimensions() throws IOException {
        assertRefused(npyFile(dict("<f4", "False", "(-3, 2)"), new byte[0]), "tensor 'arr'", "negative dimension -3");
        assertRefused(npyFile(dict("<f4", "False", "(4294967296, 4294967296, 4)"), new byte[0]), "overflows");
        assertRefused(npyFile(dict("<f4", "False", "(123456789012345678901,)"), new byte[0]),
                "overflows a 64-bit integer");
    }

    @Test
    void npyRejectsDataSizeMismatch() throws IOException {
        assertRefused(npyFile(dict("<f4", "False", "(3,)"), f32(1, 2)), "tensor 'arr'", "truncated", "needs 12 bytes");
        assertRefused(npyFile(dict("<f4", "False", "(1,)"), f32(1, 2)), "4 unexpected bytes");
    }

    // ---- .npz --------------------------------------------------------------------------------------------------

    private Path zip(String name, int method, String[] members, byte[][] contents) throws IOException {
        ByteArrayOutputStream bytes = new ByteArrayOutputStream();
        try (ZipOutputStream z = new ZipOutputStream(bytes)) {
            for (int i = 0; i < members.length; i++) {
                ZipEntry e = new ZipEntry(members[i]);
                e.setMethod(method);
                if (method == ZipEntry.STORED) {
                    java.util.zip.CRC32 crc = new java.util.zip.CRC32();
                    crc.update(contents[i]);
                    e.setSize(contents[i].length);
                    e.setCompressedSize(contents[i].length);
                    e.setCrc(crc.getValue());
                }
                z.putNextEntry(e);
                z.write(contents[i]);
                z.closeEntry();
            }
        }
        return IoFixtures.write(dir, name, bytes.toByteArray());
    }

    @Test
    void npzRejectsAZipBombBeforeAllocating() throws IOException {
        // The header claims 10^9 float32 values (4 GB) but the member's compressed bytes can inflate to ~1 MiB at most.
        byte[] member = npy(1, dict("<f4", "False", "(1000000000,)"), new byte[1 << 20]);
        Path p = zip("bomb.npz", ZipEntry.DEFLATED, new String[] {"w.npy"}, new byte[][] {member});
        assertTrue(Files.size(p) < 10_000, "a small file");
        assertRefused(p, "tensor 'w'", "needs 4000000000 bytes", "zip bomb");
    }

    @Test
    void npzRejectsStoredMemberShorterOrLongerThanItsShape() throws IOException {
        assertRefused(zip("s.npz", ZipEntry.STORED, new String[] {"w.npy"},
                new byte[][] {npy(1, dict("<f4", "False", "(100,)"), f32(1, 2))}), "tensor 'w'", "truncated");
        assertRefused(zip("s.npz", ZipEntry.STORED, new String[] {"w.npy"},
                new byte[][] {npy(1, dict("<f4", "False", "(1,)"), f32(1, 2))}), "tensor 'w'", "4 unexpected bytes");
        assertRefused(zip("s.npz", ZipEntry.DEFLATED, new String[] {"w.npy"},
                new byte[][] {npy(1, dict("<f4", "False", "(1,)"), f32(1, 2))}), "tensor 'w'", "more bytes");
        assertRefused(zip("s.npz", ZipEntry.DEFLATED, new String[] {"w.npy"},
                new byte[][] {npy(1, dict("<f4", "False", "(3,)"), f32(1, 2))}), "tensor 'w'", "truncated");
    }

    @Test
    void npzRejectsCorruptData() throws IOException {
        byte[] z = Files.readAllBytes(IoFixtures.golden("stored.npz"));
        int at = indexOf(z, NpyHeader.MAGIC) + 128 + 10; // inside the first member's data, past its .npy header
        z[at] ^= 0x40;
        assertRefused(IoFixtures.write(dir, "c.npz", z), "tensor 'weight'", "crc-32 mismatch");
    }

    private static int indexOf(byte[] hay, byte[] needle) {
        outer:
        for (int i = 0; i + needle.length <= hay.length; i++) {
            for (int j = 0; j < needle.length; j++) {
                if (hay[i + j] != needle[j]) {
                    continue outer;
                }
            }
            return i;
        }
        throw new AssertionError("not found");
    }

    @Test
    void npzRejectsDuplicateKeysAndNonArrays() throws IOException {
        byte[] a = npy(1, dict("<f4", "False", "(1,)"), f32(1));
        assertRefused(zip("d.npz", ZipEntry.STORED, new String[] {"w.npy", "w"}, new byte[][] {a, a}), "tensor 'w'",
                "duplicate tensor name");
        assertRefused(zip("d.npz", ZipEntry.DEFLATED, new String[] {"notes.txt"},
                new byte[][] {"hello, not an array".getBytes(StandardCharsets.UTF_8)}), "tensor 'notes.txt'",
                "magic");
        assertRefused(zip("d.npz", ZipEntry.DEFLATED, new String[] {"o.npy"},
                new byte[][] {npy(1, dict("|O", "False", "(1,)"), new byte[8])}), "tensor 'o'", "unpickling");
    }

    @Test
    void npzRejectsNonZipContent() throws IOException {
        assertRefused(IoFixtures.write(dir, "x.npz", "PK\u0003\u0004 definitely not a zip".getBytes(StandardCharsets.ISO_8859_1)),
                "not a valid zip");
    }

    // ---- anything else -----------------------------------------------------------------------------------------

    @Test
    void rejectsUnknownFormats() throws IOException {
        assertRefused(IoFixtures.write(dir, "x.bin", "hello world, not a checkpoint".getBytes(StandardCharsets.UTF_8)),
                "unknown checkpoint format");
    }

    @Test
    void refusesFoldersAndOtherNonRegularFiles() throws IOException {
        UncheckedIOException e = assertThrows(UncheckedIOException.class, () -> Checkpoint.open(dir));
        assertTrue(e.getMessage().contains("not a regular file"), e.getMessage());
        Path fifo = dir.resolve("pipe.safetensors");
        boolean made;
        try {
            made = new ProcessBuilder("mkfifo", fifo.toString()).start().waitFor() == 0;
        } catch (IOException | InterruptedException ex) {
            made = false;
        }
        if (made) { // a named pipe would block a reader forever
            assertThrows(UncheckedIOException.class, () -> Checkpoint.open(fifo));
        }
    }

    @Test
    void missingFileIsAnIoErrorNamingIt() {
        Path p = dir.resolve("absent.safetensors");
        UncheckedIOException e = assertThrows(UncheckedIOException.class, () -> Checkpoint.open(p));
        assertTrue(e.getMessage().contains(p.toString()) && e.getMessage().contains("no such file"), e.getMessage());
    }
}
