import sys

from crystalview.cli import main

sys.exit(main())
