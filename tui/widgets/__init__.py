"""The run view's widgets, each rendering one thing."""
