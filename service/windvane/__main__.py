import sys

from windvane.cli import main

sys.exit(main())
