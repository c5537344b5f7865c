"""The walkthroughs in examples/ run as they stand and produce the figures they discuss."""
import os
import subprocess
import sys
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"
# the scripts import this checkout's flawmix, whatever copy is installed
ENV = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, [str(EXAMPLES.parent), os.environ.get("PYTHONPATH")]))}


@pytest.mark.parametrize("script, folder, figures", [
    ("kinked_plot_unknown_origins.py", "kinked-plot", ["probability_plot.png", "probability_plot_all.png",
                                                         "failure_shares.png"]),
    ("which_flaw_to_attack.py", "which-flaw", ["size_effect.png", "failure_shares.png"]),
    ("what_the_origins_say.py", "origins", ["probability_plot.png", "flaw_sizes.png"]),
])
def test_example_runs(tmp_path, script, folder, figures):
    proc = subprocess.run([sys.executable, str(EXAMPLES / script), str(tmp_path)], capture_output=True, text=True,
                          timeout=600, env=ENV)
    assert proc.returncode == 0, proc.stderr[-2000:]
    for name in figures:
        assert (tmp_path / folder / name).stat().st_size > 5000


def test_flaw_size_example_data_regenerate_exactly(tmp_path):
    target = tmp_path / "bars.csv"
    proc = subprocess.run([sys.executable, str(EXAMPLES / "flaw_sizes" / "make_data.py"), str(target)],
                          capture_output=True, text=True, timeout=600, env=ENV)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert target.read_bytes() == (EXAMPLES / "flaw_sizes" / "bars.csv").read_bytes()
