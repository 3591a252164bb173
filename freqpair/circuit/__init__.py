"""The circuit layer: from a design to its small-signal network.

Device models (hybrid-pi, square-law MOS), the operating point and its
headroom checks, stamps, transistor tails, the two-sided stage, the generic
network with its solver (one reduction of G + sC, many frequencies), and the
frequency grid. It imports only the design layer.
"""
