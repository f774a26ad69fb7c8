"""Entry point for the Android package: python-for-android starts ``main.py`` in buildozer's
``source.dir``. The same app as ``python -m mobile``; data in the app's private storage."""

import os

os.environ.setdefault("KIVY_NO_ARGS", "1")

from mobile.app import FieldApp  # noqa: E402

if __name__ == "__main__":
    FieldApp().run()
