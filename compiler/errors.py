"""The product's own error: raised for bad input anywhere, shown by the CLI as one line, exit 2."""


class NodecastError(ValueError):
    """Bad input or a refused operation; the message is one line that states the problem and fix."""


def one_line(exc: BaseException, limit: int = 300) -> str:
    """An exception's message on one line (whitespace collapsed), at most ``limit`` characters."""
    return (" ".join(str(exc).split()) or type(exc).__name__)[:limit]


class BundleError(NodecastError):
    """A bundle that cannot be trusted: corrupt, truncated, tampered with or from the future."""
