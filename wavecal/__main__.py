"""``python -m wavecal``: the ``wavecal`` command."""
import sys

from .cli.main import main

__all__: list[str] = []

sys.exit(main())
