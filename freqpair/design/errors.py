"""Exceptions that carry a one-line message for the user."""


class FreqpairError(Exception):
    """Base class: every error freqpair raises on purpose.

    The message is always a single line that names the offending field or
    device and the value, so faces (CLI, app) can show it verbatim.
    """


class DesignError(FreqpairError, ValueError):
    """A design file or value is invalid (names the key and the value)."""


class BiasError(FreqpairError, ValueError):
    """The operating point is infeasible (names the device and the numbers)."""


class NetworkError(FreqpairError, ValueError):
    """The small-signal network cannot be solved (floating node, singular)."""
