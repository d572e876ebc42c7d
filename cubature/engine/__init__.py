"""The engine layer: domains, rules, geometry, region storage, error estimates, the adaptive run, checkpoints and
evaluators.  It imports nothing from the layers above it (problem files, sessions, front ends)."""
