"""``python -m freqpair.cli``: the ``freqpair`` command."""
import sys

from freqpair.cli.main import main

sys.exit(main())
