package dev.rungbook.plan;

/**
 * What {@link BitBudget} minimises: the sum over layers of one per-layer sensitivity measured by
 * {@link Sensitivity} (each layer quantized alone). Summing assumes the layers' errors add up, which is a first-order
 * approximation (common practice); {@link Allocation} reports the measured value of the whole plan beside the
 * prediction.
 */
public enum Objective {
    /** Mean KL divergence (nats) of the quantized network's softmax from the float network's; needs no labels. */
    KL_DIVERGENCE("kl_divergence"),
    /** Mean squared difference of the logits; needs no labels. */
    LOGIT_MSE("logit_mse"),
    /** Float accuracy minus quantized accuracy on the labelled data; needs labels. */
    ACCURACY_DROP("accuracy_drop");

    private final String column;

    Objective(String column) {
        this.column = column;
    }

    /** The column of {@link SensitivityResult#table()} holding this objective. */
    public String column() {
        return column;
    }

    /**
     * The objective named by its column name or constant name, case-insensitive ({@code kl_divergence}, {@code kl},
     * {@code logit_mse}, {@code mse}, {@code accuracy_drop}, {@code accuracy}).
     *
     * @throws IllegalArgumentException naming the accepted names
     */
    public static Objective parse(String name) {
        String n = name.trim().toLowerCase(java.util.Locale.ROOT).replace('-', '_');
        switch (n) {
            case "kl_divergence":
            case "kl":
                return KL_DIVERGENCE;
            case "logit_mse":
            case "mse":
                return LOGIT_MSE;
            case "accuracy_drop":
            case "accuracy":
                return ACCURACY_DROP;
            default:
                throw new IllegalArgumentException("unknown objective '" + name
                        + "'; use kl_divergence (kl), logit_mse (mse) or accuracy_drop (accuracy)");
        }
    }
}
