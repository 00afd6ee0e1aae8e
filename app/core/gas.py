"""(being written) measurement core module: gas."""
