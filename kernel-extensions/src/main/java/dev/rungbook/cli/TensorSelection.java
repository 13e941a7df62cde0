package dev.rungbook.cli;

import dev.rungbook.quant.Export;
import java.util.ArrayList;
import java.util.List;
import java.util.function.Predicate;
import java.util.regex.Pattern;
import picocli.CommandLine.Option;

/** The {@code --tensors GLOB} option shared by the batch commands (a picocli mixin). */
final class TensorSelection {
    @Option(names = "--tensors", paramLabel = "GLOB", description = {"Only tensors whose names match (* any run of "
        + "characters, dots included; ? one character); repeatable. Default: every tensor."})
    List<String> globs = new ArrayList<>();

    /** The globs given, or {@code *}. */
    List<String> globsOrAll() {
        return globs.isEmpty() ? List.of("*") : globs;
    }

    /** True for a name that some glob matches. */
    Predicate<String> matcher() {
        List<Pattern> ps = new ArrayList<>();
        for (String g : globsOrAll()) {
            ps.add(Export.glob(g));
        }
        return n -> ps.stream().anyMatch(p -> p.matcher(n).matches());
    }
}
