"""The app's export folder gets the file modes an ordinary write gives (the office shares these files)."""

import os
import stat

from mobile.services import export


def _whole_test(service):
    h = service.area.hydrants
    tid = service.new_test(crew="A. Brennan")
    for key in service.checklist_keys():
        assert service.tick(tid, key, True).ok
    assert service.set_gauges(tid, [h[0]]).ok
    assert service.add_outlet(tid, h[1], diameter_text="2.5", shape="smooth").ok
    for field, text in ((f"static@{h[0]}", "72"), (f"residual@{h[0]}", "58"), ("pitot@o1", "22")):
        assert service.enter(tid, field, text).ok
    return tid


def test_export_files_get_the_umask_mode_not_0600(service, tmp_path):
    # POSIX open(2): a new file is 0666 less the umask; the reference is an ordinary write beside it
    tid = _whole_test(service)
    assert service.finish(tid).ok
    old = os.umask(0o022)
    try:
        (tmp_path / "plain.txt").write_text("x")
        export.export_tests(service, tmp_path / "out")
    finally:
        os.umask(old)
    want = stat.S_IMODE((tmp_path / "plain.txt").stat().st_mode)
    files = sorted((tmp_path / "out").iterdir())
    assert want == 0o644 and len(files) >= 5, files
    assert {f.name: oct(stat.S_IMODE(f.stat().st_mode)) for f in files} == {f.name: oct(want) for f in files}
