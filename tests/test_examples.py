"""The repository's own examples, as a user's clone has them.

A clone holds only the repository: no ``../shared`` folder beside it, no files outside
it. Every example job under ``netlists/`` must measure there, with every corner "ok".
"""

from __future__ import annotations

import json
import math
import subprocess
import sys

from conftest import REPO


def _clone(target) -> None:
    """A plain clone of the repository's committed state (uncommitted files are not in it,
    as they are not in a user's clone)."""
    subprocess.run(["git", "clone", "--quiet", str(REPO), str(target)], check=True,
                   capture_output=True, text=True, timeout=120)


def test_every_example_job_measures_from_a_fresh_clone(tmp_path):
    clone = tmp_path / "clone"
    _clone(clone)
    assert not (tmp_path / "shared").exists()  # nothing beside the clone to lean on
    jobs = sorted((clone / "netlists").glob("*/job*.toml"))
    assert len(jobs) >= 3, jobs  # demo, demo triode, 45 nm
    for job in jobs:
        out = tmp_path / "out" / f"{job.parent.name}-{job.stem}"
        proc = subprocess.run(
            [sys.executable, "-m", "amploop.cli", "measure", str(job), "--out", str(out),
             "--workers", "2", "--no-report", "--quiet"],
            cwd=clone, capture_output=True, text=True, timeout=300, check=False)
        assert proc.returncode == 0, f"{job.relative_to(clone)}: {proc.stderr.strip()}"
        results = json.loads((out / "results.json").read_text())
        assert results["status"] == "ok"
        assert results["corners"] and all(c["status"] == "ok" for c in results["corners"])
        assert all(math.isfinite(c["phase_margin_deg"]) for c in results["corners"])
        assert str(clone) in results["job_file"]
