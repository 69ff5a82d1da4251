"""Two builds at once, and an analysis beside a build: one writer at a time, readers never wait
for a build nor see half of one; then an analysis succeeds (common practice, no source)."""

from __future__ import annotations

import pytest

from toolkit import config, workspace
from tests.workspace.conftest import first_campaign, liftlag, partial_files, run_liftlag

pytestmark = pytest.mark.slow


def test_two_builds_at_once_then_an_analysis(demo_copy, tmp_path):
    first, second = liftlag("build", "-c", demo_copy), liftlag("build", "-c", demo_copy)
    outputs = [p.communicate(timeout=300) for p in (first, second)]
    assert [p.returncode for p in (first, second)] == [0, 0], outputs
    for (out, err), other in zip(outputs, (second, first)):
        assert "Traceback" not in err
        if "waiting up to" in err:  # the one that waited says for whom
            assert f"pid {other.pid}" in " ".join(err.split())
    settings = config.load(demo_copy)
    assert not workspace.staleness(settings, workspace.published_build(settings))
    assert "failed" not in workspace.read_state(settings)
    assert partial_files(demo_copy) == []
    code, out, err = run_liftlag("campaign", first_campaign(demo_copy), "-c", demo_copy, "--out", tmp_path / "out")
    assert code == 0, err
    assert "building the panels first" not in out + err
    assert (tmp_path / "out" / f"campaign_{first_campaign(demo_copy)}.html").exists()


def test_an_analysis_beside_a_forced_build_reads_the_published_panels(demo_copy, tmp_path):
    assert run_liftlag("build", "-c", demo_copy)[0] == 0
    pid = first_campaign(demo_copy)
    build = liftlag("build", "--force", "-c", demo_copy)
    reader = liftlag("campaign", pid, "-c", demo_copy, "--out", tmp_path / "out")
    (b_out, b_err), (r_out, r_err) = build.communicate(timeout=300), reader.communicate(timeout=300)
    assert build.returncode == 0, b_err
    assert reader.returncode == 0, r_err
    assert "waiting" not in r_err  # a reader takes no lock
    assert partial_files(demo_copy) == []
