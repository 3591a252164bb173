"""The design layer: what a design file says, checked.

The schema (validated, immutable design objects and their one-line errors),
the files on disk (TOML read and written atomically, CSV text, the built-in
example), dotted-key reads and replacements, SI quantities, and the error
classes every layer raises. It is the lowest layer and imports no other part
of freqpair.
"""
