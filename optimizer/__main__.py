"""``python -m optimizer`` is the same as the ``brace`` command."""
import sys

from .cli import main

sys.exit(main())
