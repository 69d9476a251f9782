import sys

from paneldiag.cli import main

sys.exit(main())
