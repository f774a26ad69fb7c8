"""The device's position where the platform gives one, through plyer's GPS facade.

plyer (the Kivy project's platform wrapper) reaches Android's and iOS's location services; on a
desktop it has none and ``start`` says so. The position is handed to ``on_position(lon, lat)`` on
the platform's thread: the caller makes it safe for its UI.
"""

from __future__ import annotations


def start(on_position, on_status) -> bool:
    """Ask for one position fix; False (and ``on_status`` told why) when there is no location."""
    try:
        from plyer import gps
        from plyer.utils import platform
    except ImportError:
        on_status("No location service in this build: tap where you stand on the map")
        return False
    if platform not in ("android", "ios"):  # plyer has no location service on desktops
        on_status(f"This device ({platform}) gives no location: tap where you stand on the map")
        return False

    def got(**kw):
        if "lon" in kw and "lat" in kw:
            on_position(float(kw["lon"]), float(kw["lat"]))
            try:
                gps.stop()
            except Exception:  # noqa: BLE001 - stopping a platform service must not crash the app
                pass

    try:
        gps.configure(on_location=got, on_status=lambda kind, text: on_status(f"Location: {text}"))
        gps.start(minTime=1000, minDistance=0)
    except (NotImplementedError, ModuleNotFoundError, AttributeError, OSError) as exc:
        on_status("This device gives no location here: tap where you stand on the map"
                  + (f" ({exc})" if str(exc) else ""))
        return False
    return True
