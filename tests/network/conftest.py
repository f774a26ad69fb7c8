"""Small network folders written from CSV text, for the reader and validation tests."""

import textwrap
from pathlib import Path

import pytest

# A three-node network: one reservoir feeding two junctions in series (invented test data).
JUNCTIONS = """\
id,elevation [ft],demand [gpm],hydrant
J1,100,50,yes
J2,110,20,no
"""
SOURCES = """\
id,head [ft]
R1,300
"""
PIPES = """\
id,from,to,length [ft],diameter [in],roughness
P1,R1,J1,1000,8,100
P2,J1,J2,500,6,120
"""


@pytest.fixture
def make_folder(tmp_path):
    """``make_folder(junctions=..., sources=..., pipes=..., pumps=...)`` writes a network folder."""
    count = [0]

    def make(junctions=JUNCTIONS, sources=SOURCES, pipes=PIPES, pumps=None) -> Path:
        count[0] += 1
        folder = tmp_path / f"net{count[0]}"
        folder.mkdir()
        for name, text in (("junctions", junctions), ("sources", sources), ("pipes", pipes),
                           ("pumps", pumps)):
            if text is not None:
                (folder / f"{name}.csv").write_text(textwrap.dedent(text))
        return folder

    return make
