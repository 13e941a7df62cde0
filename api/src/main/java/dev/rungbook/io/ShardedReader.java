package dev.rungbook.io;

import com.google.gson.Strictness;
import com.google.gson.stream.JsonReader;
import com.google.gson.stream.JsonToken;
import java.io.IOException;
import java.io.StringReader;
import java.nio.channels.FileChannel;
import java.nio.file.Files;
import java.nio.file.Path;
import java.nio.file.StandardOpenOption;
import java.util.LinkedHashMap;
import java.util.Map;

/**
 * Reads a sharded safetensors checkpoint through its index, a JSON file {@code {"metadata": {...}, "weight_map":
 * {"tensor name": "shard file name", ...}}}. Shards are plain file names in the index's folder. The checkpoint holds the
 * tensors the weight map names, in its order; each must be in the shard named for it. Metadata: the index's
 * {@code metadata} entries (numbers as their JSON text), then each shard's {@code __metadata__} entries whose keys are
 * not yet present.
 */
final class ShardedReader {
    private ShardedReader() {
    }

    static Contents read(Path index) throws IOException {
        long size = Files.size(index);
        if (size > SafetensorsReader.HEADER_LIMIT) {
            throw new CheckpointFormatException(index, null, "index is " + size + " bytes, over the limit of "
                    + SafetensorsReader.HEADER_LIMIT + " bytes (100 MiB)");
        }
        String json = Text.utf8(Files.readAllBytes(index), index, "index");
        Text.checkJsonDepth(json, index, "index");
        Map<String, String> indexMeta = new LinkedHashMap<>();
        Map<String, String> weightMap = new LinkedHashMap<>();
        parse(index, json, indexMeta, weightMap);

        Contents c = new Contents("safetensors (sharded)");
        c.files.add(index);
        c.metadata.putAll(indexMeta);
        try {
            Path dir = index.toAbsolutePath().getParent();
            Map<String, Contents> shards = new LinkedHashMap<>();
            for (Map.Entry<String, String> w : weightMap.entrySet()) {
                String shardName = w.getValue();
                Contents shard = shards.get(shardName);
                if (shard == null) {
                    if (shardName.isEmpty() || shardName.contains("/") || shardName.contains("\\")
                            || shardName.equals("..") || shardName.equals(".")) {
                        throw new CheckpointFormatException(index, w.getKey(), "shard '" + shardName
                                + "' is not a plain file name in the index's folder");
                    }
                    Path shardPath = dir.resolve(shardName);
                    if (!Files.isRegularFile(shardPath)) {
                        throw new CheckpointFormatException(index, w.getKey(), "missing shard '" + shardName
                                + "' (expected at " + shardPath + ")");
                    }
                    shard = new Contents("safetensors");
                    FileChannel ch = FileChannel.open(shardPath, StandardOpenOption.READ);
                    c.resources.add(ch);
                    c.files.add(shardPath);
                    SafetensorsReader.readInto(shardPath, ch, shard);
                    shards.put(shardName, shard);
                    shard.metadata.forEach(c.metadata::putIfAbsent);
                }
                Entry e = shard.entries.get(w.getKey());
                if (e == null) {
                    throw new CheckpointFormatException(dir.resolve(shardName), w.getKey(),
                            "the index maps this tensor to this shard, which does not hold it");
                }
                c.add(e);
            }
            return c;
        } catch (RuntimeException | IOException e) {
            c.closeAll();
            throw e;
        }
    }

    private static void parse(Path index, String json, Map<String, String> meta, Map<String, String> weightMap) {
        boolean sawMap = false;
        try (JsonReader r = new JsonReader(new StringReader(json))) {
            r.setStrictness(Strictness.STRICT);
            r.beginObject();
            while (r.hasNext()) {
                String key = r.nextName();
                if (key.equals("metadata")) {
                    if (r.peek() == JsonToken.NULL) {
                        r.nextNull();
                        continue;
                    }
                    r.beginObject();
                    while (r.hasNext()) {
                        String k = r.nextName();
                        JsonToken t = r.peek();
                        if (t != JsonToken.STRING && t != JsonToken.NUMBER && t != JsonToken.BOOLEAN) {
                            throw new CheckpointFormatException(index, null, "metadata value of '" + k + "' is " + t
                                    + ", expected a string, number or boolean");
                        }
                        String v = t == JsonToken.BOOLEAN ? Boolean.toString(r.nextBoolean()) : r.nextString();
                        if (meta.put(k, v) != null) {
                            throw new CheckpointFormatException(index, null, "duplicate metadata key '" + k + "'");
                        }
                    }
                    r.endObject();
                } else if (key.equals("weight_map")) {
                    sawMap = true;
                    r.beginObject();
                    while (r.hasNext()) {
                        String name = r.nextName();
                        if (r.peek() != JsonToken.STRING) {
                            throw new CheckpointFormatException(index, name, "weight_map value is " + r.peek()
                                    + ", expected a shard file name");
                        }
                        if (weightMap.put(name, r.nextString()) != null) {
                            throw new CheckpointFormatException(index, name, "duplicate tensor name in weight_map");
                        }
                    }
                    r.endObject();
                } else {
                    r.skipValue(); // other keys carry nothing Rungbook reads
                }
            }
            r.endObject();
            if (r.peek() != JsonToken.END_DOCUMENT) {
                throw new CheckpointFormatException(index, null, "invalid JSON index: text after the top-level object");
            }
        } catch (IOException | IllegalStateException | NumberFormatException e) {
            throw new CheckpointFormatException(index, null, "invalid JSON index: " + e.getMessage(), e);
        }
        if (!sawMap) {
            throw new CheckpointFormatException(index, null, "index has no weight_map");
        }
    }
}
