"""The walkthroughs in examples/ run as they stand and produce the figures they discuss."""
import subprocess
import sys
from pathlib import Path

import pytest

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


@pytest.mark.parametrize("script, folder, figures", [
    ("kinked_plot_unknown_origins.py", "kinked-plot", ["probability_plot.png", "probability_plot_all.png",
                                                         "failure_shares.png"]),
    ("which_flaw_to_attack.py", "which-flaw", ["size_effect.png", "failure_shares.png"]),
])
def test_example_runs(tmp_path, script, folder, figures):
    proc = subprocess.run([sys.executable, str(EXAMPLES / script), str(tmp_path)], capture_output=True, text=True,
                          timeout=600)
    assert proc.returncode == 0, proc.stderr[-2000:]
    for name in figures:
        assert (tmp_path / folder / name).stat().st_size > 5000
