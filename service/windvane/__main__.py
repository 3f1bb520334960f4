import sys

from windvane.cli.main import main

sys.exit(main())
