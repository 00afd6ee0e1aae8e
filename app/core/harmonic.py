"""(being written) measurement core module: harmonic."""
