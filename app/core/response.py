"""(being written) measurement core module: response."""
