"""The plot draws only the version of a file that its run analysed (sha256 checked): a file
rewritten after its run was recorded is said to have changed, never drawn under the old
version's markers."""
from __future__ import annotations

from pathlib import Path

from tui.app import BandwatchApp
from tui.widgets.spectrum_plot import SpectrumPlot

from tui_support import quiet, write_spectrum_csv

SIZE = (80, 24)


async def test_a_rewritten_export_file_is_said_to_have_changed(lab: dict[str, Path]) -> None:
    app = BandwatchApp(lab["data"], lab["export"], operator="tester")
    async with app.run_test(size=SIZE) as pilot:
        await quiet(pilot)
        await pilot.press("j")  # hcl_cell_03, drawn as analysed
        await quiet(pilot)
        plot = app.screen.query_one(SpectrumPlot)
        assert plot.window is not None and "H35Cl" in plot.render().plain
        # the instrument PC writes a new scan under the same name; the run still holds the old
        write_spectrum_csv(lab["export"] / "hcl_cell_03.csv", 2885.98 + 0.5)
        await pilot.press("j", "k")  # away and back: the file is read again
        await quiet(pilot)
        shown = plot.render().plain
        assert plot.window is None  # nothing drawn
        assert "hcl_cell_03.csv has changed since run 3 analysed it" in shown
        assert "H35Cl" not in shown  # no markers of the old version
