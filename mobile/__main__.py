"""``python -m mobile [--demo] [--snapshot DIR] [--data-dir DIR]``: start the field app."""

from __future__ import annotations

import argparse
import os
import sys


def parse_args(argv=None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(
        prog="python -m mobile",
        description="Field app for hydrant flow tests: log, check on site, export to the office.")
    parser.add_argument("--demo", action="store_true",
                        help="open with the demo town (Tallowmere) and a few tests logged")
    parser.add_argument("--snapshot", metavar="DIR",
                        help="open each main screen with the demo data, save a PNG into DIR, exit")
    parser.add_argument("--data-dir", metavar="DIR",
                        help="where the database is kept (default: the app's user data folder)")
    parser.add_argument("--size", default="1280x800", metavar="WxH",
                        help="window size on a desktop (default 1280x800)")
    return parser.parse_args(argv)


def main(argv=None) -> int:
    args = parse_args(argv)
    os.environ.setdefault("KIVY_NO_ARGS", "1")  # Kivy must not read our arguments
    from kivy.config import Config

    try:
        width, height = (int(v) for v in args.size.lower().split("x"))
    except ValueError:
        print(f"error: --size must look like 1280x800, not '{args.size}'", file=sys.stderr)
        return 2
    Config.set("graphics", "width", str(width))
    Config.set("graphics", "height", str(height))
    Config.set("input", "mouse", "mouse,disable_multitouch")
    Config.set("kivy", "exit_on_escape", "0")

    from calib.errors import CalibError
    from mobile.app import FieldApp

    try:
        app = FieldApp(data_dir=args.data_dir, demo_mode=args.demo, snapshot_dir=args.snapshot)
        app.run()
    except CalibError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    if args.snapshot:
        print("\n".join(app.snapshots))
        from mobile.screens import SCREENS

        return 0 if len(app.snapshots) == len(SCREENS) else 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
