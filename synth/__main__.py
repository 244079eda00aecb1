"""Allow ``python -m synth`` as an alias of the ``barwright`` command."""

from synth.cli import main

main()
