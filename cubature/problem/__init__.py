"""The problem layer: TOML problem files, the safe expression compiler and the library of problem files.
It builds on the engine layer and never imports the session layer or the front ends."""
