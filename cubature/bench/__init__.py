"""The benchmark: Genz's test families and ``cubage bench`` (strategies side by side, scipy peers)."""
