"""Shared fixtures: small jobs around the linear macromodel, written into tmp folders."""

from __future__ import annotations

import sqlite3
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

from nodal import Macromodel

REPO = Path(__file__).resolve().parents[1]
SHARED = REPO.parent / "shared"
DEMO = REPO / "netlists" / "demo"


def write_macro_job(folder: Path, model: Macromodel, corners: dict[str, float] | None = None,
                    *, extra: str = "", probe: str = "double-injection",
                    points_per_decade: int = 40, stop: str = "10G") -> Path:
    """A job around ``model``; ``corners`` maps corner name -> load capacitance (F)."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "macro.cir").write_text(model.netlist())
    corners = corners or {"only": model.cl}
    if model.kind == "resistive":
        feedback = f'kind = "resistive"\ninput = "{model.z_in!r}"\nfeedback = "{model.z_fb!r}"'
    else:
        feedback = (f'kind = "capacitive"\ninput = "{model.z_in!r}"\nfeedback = "{model.z_fb!r}"\n'
                    f'dc_path = "{model.r_dc!r}"')
    text = f'''name = "macro-test"
[amplifier]
netlist = "macro.cir"
subckt = "macro"
in_p = "inp"
in_n = "inn"
out = "out"
[bias]
common_mode = "0.9"
[feedback]
{feedback}
load = "{{cl}}"
[compensation]
cc = {{ param = "cc", min = "0.1p", max = "20p" }}
rc = {{ param = "rc", min = "0", max = "50k" }}
[analysis]
start = "1"
stop = "{stop}"
points_per_decade = {points_per_decade}
probe = "{probe}"
{extra}
'''
    for name, cl in corners.items():
        text += f'[[corners]]\nname = "{name}"\nparams = {{ cl = {cl!r} }}\n'
    job = folder / "job.toml"
    job.write_text(text)
    return job


@pytest.fixture
def macro_job(tmp_path):
    """Factory: ``macro_job(model, corners=None, **options) -> path of job.toml``."""

    def make(model: Macromodel | None = None, corners=None, **options) -> Path:
        return write_macro_job(tmp_path / "job", model or Macromodel(), corners, **options)

    return make


def needs_shared():
    """Skip marker for tests that read ../shared (the model cards); says why."""
    return pytest.mark.skipif(not (SHARED / "models" / "ptm45").is_dir(),
                              reason="../shared/models/ptm45 is absent on this machine")


def recorded_analyses(journal: Path) -> int:
    """How many analyses the journal ``journal`` holds (0 while it cannot be read), read
    without disturbing the run that writes it."""
    try:
        with sqlite3.connect(f"file:{journal}?mode=ro", uri=True, timeout=1) as db:
            return db.execute("SELECT COUNT(*) FROM analyses").fetchone()[0]
    except sqlite3.Error:
        return 0


CHROMIUM, CHROMEDRIVER = Path("/usr/bin/chromium"), Path("/usr/bin/chromedriver")


@pytest.fixture(scope="module")
def browser():
    """Debian's headless Chromium through selenium (explore.html's tests); skipped, saying
    why, without the packages."""
    webdriver = pytest.importorskip("selenium.webdriver",
                                    reason="selenium is not installed (scripts/setup installs it)")
    from selenium.webdriver.chrome.service import Service

    if not (CHROMIUM.exists() and CHROMEDRIVER.exists()):
        pytest.skip("no browser: Debian's chromium and chromium-driver packages are not "
                    "installed (scripts/setup installs them)")
    options = webdriver.ChromeOptions()
    options.binary_location = str(CHROMIUM)
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage",
                 "--window-size=1300,1500", "--allow-file-access-from-files"):
        options.add_argument(flag)
    # the driver named explicitly: no Selenium Manager download
    driver = webdriver.Chrome(service=Service(str(CHROMEDRIVER)), options=options)
    yield driver
    driver.quit()
