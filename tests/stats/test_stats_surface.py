import subprocess
import sys

import benchlog.stats
import benchlog.views.report


def test_public_surface_resolves():
    for mod in (benchlog.stats, benchlog.views.report):
        assert len(mod.__all__) == len(set(mod.__all__))
        for name in mod.__all__:
            assert getattr(mod, name) is not None


def test_stats_works_on_arrays_alone():
    # the statistics stage reads no database and draws nothing: importing it pulls in neither
    code = (
        "import sys, benchlog.stats; bad = [m for m in sys.modules if m.startswith(('benchlog.store', "
        "'benchlog.views', 'sqlalchemy', 'matplotlib'))]; print(bad); sys.exit(1 if bad else 0)"
    )
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert res.returncode == 0, res.stdout
