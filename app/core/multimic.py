"""(being written) measurement core module: multimic."""
