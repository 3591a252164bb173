"""The command line: ``freqpair SUBCOMMAND ...``.

:mod:`freqpair.cli.main` builds the parser from one module per subcommand
(``analyze``, ``sweep``, ``target``, ``montecarlo``, ``compensate``, ``fit``,
``report``, ``compare``, ``app``) plus what they share (:mod:`freqpair.cli.common`).
A subcommand imports what it needs when it runs, so the parser itself starts
fast. It may import every layer below it; nothing imports it.
"""
