"""``python -m service.cli``: the ``certimatch`` command."""

import sys

from service.cli.main import main

sys.exit(main())
