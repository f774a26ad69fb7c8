"""Writer process for the kill test: commits readings one by one and reports each after its commit.

Usage: ``python kill_writer.py DATA_DIR START``. Prints ``seq value`` once ``add_reading`` returned
(the transaction is committed), flushing stdout, until it is killed.
"""

import sys

from mobile.store import Store, StoreError

folder, start = sys.argv[1], int(sys.argv[2])
store = Store.open(folder)
try:
    store.create_test("KILL", {"crew": "kill test"})
except StoreError:
    pass  # made by an earlier trial
i = start
while True:
    value = 1000.0 + i
    seq = store.add_reading("KILL", f"static@H{i % 7}", value, "psi", f"{i}")
    sys.stdout.write(f"{seq} {value}\n")
    sys.stdout.flush()
    i += 1
