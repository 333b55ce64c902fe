"""``python -m sectionkit.demo --write DIR [--small]``: write the demo files."""

import sys

from sectionkit.demo.files import main

sys.exit(main())
