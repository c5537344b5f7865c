"""Walkthrough 3: a fractographer checks her origin labels and flaw sizes.

Scenario (invented, examples/flaw_sizes/): 40 silicon-nitride bars broken in four-point
flexure; every fracture surface was examined, most origins were named and measured, three
were not found. Two questions: which labels should she look at again, and do the measured
flaw sizes agree with the material's fracture toughness (K_Ic = 5.5 MPa·√m)?

Run:  python examples/what_the_origins_say.py [OUTPUT_FOLDER]
"""
import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import flawmix as fm
from flawmix import plots
from flawmix.fracture import analyse_flaws
from flawmix.origins import specimens_to_reexamine
from flawmix.study import read_study

out = Path(sys.argv[1] if len(sys.argv) > 1 else "example-output") / "origins"
out.mkdir(parents=True, exist_ok=True)
study = read_study(Path(__file__).parent / "flaw_sizes" / "study.toml")
specimens = fm.read_specimens(study.specimens, study.populations, study.unit)
result = fm.fit(specimens)

# 1. The three unidentified origins: which population, given how strong each bar was?
table = result.origin_probabilities()
print(table[table["reading"] == "unidentified"][["specimen", "strength", "pores", "machining"]].to_string(index=False))

# 2. Labels that are improbable at their strength once the label itself is set aside
again = specimens_to_reexamine(result)
print("\nlabels to re-examine:\n" + (again.to_string(index=False) if len(again) else "none"))
ax = plots.probability_plot(result, mark=again["specimen"])
ax.figure.savefig(out / "probability_plot.png", dpi=110, bbox_inches="tight")

# 3. Fracture mechanics: does each measured flaw imply K_Ic, and how large a flaw can the
#    part's 300 MPa tolerate?
flaws = analyse_flaws(specimens, study, stress=400.0)
print()
print(flaws)
plots.flaw_size_plot(flaws).figure.savefig(out / "flaw_sizes.png", dpi=110, bbox_inches="tight")
# SN-06 is caught twice: its label (machining) is improbable at 303 MPa, and its origin was
# found in the interior, where machining damage cannot be: a pore, most likely.
