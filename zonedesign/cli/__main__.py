"""`python -m zonedesign.cli`: the same as the `zonedesign` command."""

import sys

from zonedesign.cli.commands import main

sys.exit(main())
