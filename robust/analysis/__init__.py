"""Linear robustness analysis over batches of models: eigenvalues, margins, worst case, statistics."""
