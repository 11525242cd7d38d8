"""The study report: one self-contained HTML page, checked by parsing it and
by drawing it in a real headless browser (Chromium, from the operating
system's packages: the README's test command installs it).

Check values come from the sweep's own input and output files (the ranges,
the status counts) and from the PNG format's definition (signature and
IHDR header, ISO/IEC 15948)."""

from __future__ import annotations

import base64
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import eqbatch
import matplotlib.image
import numpy as np
import pyarrow.parquet as pq
import pytest
from conftest import png_size
from eqbatch.cli import main
from eqbatch.demo import reformer_system, system_file_text
from eqbatch.grid import make_grid, write_grid
from eqbatch.report import study_report
from eqbatch.sweeps import sweep
from eqbatch.uncertainty import monte_carlo


class _Page(HTMLParser):
    """Headings, table cells, text and images of a page."""

    def __init__(self) -> None:
        super().__init__()
        self.headings: list[str] = []
        self.cells: list[str] = []
        self.images: list[str] = []
        self.text: list[str] = []
        self._in: str | None = None

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        self._in = tag
        if tag == "img":
            self.images.append(dict(attrs)["src"] or "")

    def handle_endtag(self, tag: str) -> None:
        self._in = None

    def handle_data(self, data: str) -> None:
        self.text.append(data)
        if self._in in ("h1", "h2"):
            self.headings.append(data)
        elif self._in == "td":
            self.cells.append(data)


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> tuple[Path, Path]:
    folder = tmp_path_factory.mktemp("study")
    table = make_grid(
        {"T_K": (700, 1200, 11), "P_bar": (1, 40, 3), "feed_H2O": (1.5, 5.0, 4)},
        constants={"feed_CH4": 1.0, "feed_N2": 0.02},
    )
    write_grid(folder / "cases.parquet", table)
    sweep(reformer_system(), folder / "cases.parquet", folder / "results.parquet", quiet=True)
    (folder / "reformer.toml").write_text(system_file_text())
    return folder / "cases.parquet", folder / "results.parquet"


def test_the_report_holds_the_system_ranges_statuses_plots_and_cautions(study, tmp_path) -> None:
    cases, results = study
    system = reformer_system()
    mc = monte_carlo(
        system,
        feed={"CH4": 1.0, "H2O": 3.0},
        T=1000.0,
        P=20.0,
        dG_sigma={"reforming": 3.0},
        samples=300,
        seed=1,
    )
    out = study_report(
        results, tmp_path / "report.html", system=system, uncertainty=mc, title="Reformer study"
    )
    page = _Page()
    page.feed(out.read_text())
    for heading in ("Reformer study", "System", "Cases", "Status", "Plots", "Uncertainty"):
        assert heading in page.headings
    text = " ".join(page.text)
    assert "made with this system" in text
    assert "not a reactor design" in text and "licensed engineers" in text  # the caution
    # the reactions and each species' data source
    assert (
        "CH4 + H2O = CO + 3 H2" in page.cells
        and "NIST Chemistry WebBook, Shomate coefficients (H2O)" in page.cells
    )
    # the ranges of the cases, as the input file has them
    given = pq.read_table(cases).to_pandas()
    k = page.cells.index("T_K")
    assert page.cells[k + 1 : k + 4] == [f"{given.T_K.min():.6g}", f"{given.T_K.max():.6g}", "11"]
    # every case converged, by the result file's own status column
    status = pq.read_table(results, columns=["status"]).column(0).to_numpy()
    k = page.cells.index("converged")
    assert page.cells[k + 2] == f"{int(np.sum(status == 0)):,}" == f"{len(given):,}"
    # the plots are PNG images inside the page: conversions of CH4 and H2O, three fractions
    assert len(page.images) == 5
    for src in page.images:
        assert src.startswith("data:image/png;base64,")
        png = base64.b64decode(src.split(",", 1)[1])
        assert png[:8] == b"\x89PNG\r\n\x1a\n" and png[12:16] == b"IHDR"
    # another system than the one solved is flagged
    other = eqbatch.ReactionSystem(["CO", "H2O", "CO2", "H2"], ["CO + H2O = CO2 + H2"])
    flagged = study_report(results, tmp_path / "other.html", system=other).read_text()
    assert "made with another system" in flagged


def test_the_report_draws_in_a_headless_browser(study, tmp_path, capsys) -> None:
    _, results = study
    toml = results.parent / "reformer.toml"
    assert main(["report", str(results), "--system", str(toml), "--out", str(tmp_path / "r.html")]) == 0
    assert "wrote" in capsys.readouterr().out
    browser = shutil.which("chromium") or shutil.which("chromium-browser") or shutil.which("google-chrome")
    assert browser, "a headless Chromium is needed: apt-get install -y chromium (the README's test command)"
    shot = tmp_path / "shot.png"
    subprocess.run(
        [
            browser,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            "--window-size=1000,1800",
            f"--screenshot={shot}",
            (tmp_path / "r.html").as_uri(),
        ],
        capture_output=True,
        timeout=120,
        check=True,
    )
    assert png_size(shot) == (1000, 1800)
    pixels = matplotlib.image.imread(shot)[..., :3]
    # not blank: a good share of the page is drawn (text, tables, the caution's
    # colour, the plots), in more than a few colours
    drawn = np.mean(np.any(pixels < 0.9, axis=2))
    assert drawn > 0.05
    assert len(np.unique((pixels * 255).astype(np.uint8).reshape(-1, 3), axis=0)) > 50


def test_outputs_are_not_taken_for_inputs() -> None:
    # an adiabatic sweep's outlet temperature is an output: plots and the report must
    # neither average over it nor plot against it as a swept input
    from eqbatch.report import _is_input

    assert not _is_input("T_out_K") and not _is_input("H_out_kJ") and not _is_input("heat_kJ")
    inputs = ("T_K", "T_C", "T_in_K", "P_bar", "P_psig", "feed_CH4", "feed_CH4[kmol/h]", "S_C", "lnK_shift")
    for name in inputs:
        assert _is_input(name), name


def test_the_report_plots_only_converged_cases(study, tmp_path) -> None:
    cases, _ = study
    sweep(reformer_system(), cases, tmp_path / "none.parquet", max_iter=0, quiet=True)  # nothing converges
    page = study_report(tmp_path / "none.parquet", tmp_path / "none.html").read_text()
    assert "No case converged: nothing to plot." in page and "data:image/png" not in page
    assert "iteration limit" in page  # the statuses by name
