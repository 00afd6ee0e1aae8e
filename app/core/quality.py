"""(being written) measurement core module: quality."""
