import gc
import sys

from calib.cli import main

code = main()
# The process ends here: its objects need no final garbage collection, which took 0.2-0.5 s after
# a fit (benchmarks/README.md, issue 14 D). Frozen, they are left to the operating system; atexit
# handlers still run and every output file is closed already.
gc.freeze()
sys.exit(code)
