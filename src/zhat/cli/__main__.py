"""``python -m zhat.cli``: the same as the ``zhat`` command."""

from zhat.cli.main import main_exit

main_exit()
