import sys

from probelog.tui.cli import main

sys.exit(main())
