"""Fixtures for the field app's tests: a fresh store, a service on a small built-in network.

Kivy is kept from reading pytest's arguments and from writing into ~/.kivy (KIVY_HOME in a temp dir).
"""

import os
import tempfile

import pytest

os.environ.setdefault("KIVY_NO_ARGS", "1")
os.environ.setdefault("KIVY_NO_CONSOLELOG", "1")
os.environ.setdefault("KIVY_HOME", tempfile.mkdtemp(prefix="kivy-home-"))

from mobile.services.area import Area  # noqa: E402
from mobile.services.demo import builtin_network  # noqa: E402
from mobile.services.session import TestService  # noqa: E402
from mobile.store import Store  # noqa: E402


@pytest.fixture
def store(tmp_path):
    s = Store.open(tmp_path / "data")
    yield s
    s.close()


@pytest.fixture
def area():
    return Area.from_network(builtin_network(), name="Tallowmere", source="built-in")


@pytest.fixture
def service(store, area):
    return TestService(store, area)
