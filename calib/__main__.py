import sys

from calib.cli import main

sys.exit(main())
