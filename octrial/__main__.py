"""``python -m octrial`` is the ``octrial`` command."""

from octrial.cli import main

main(prog_name="octrial")
