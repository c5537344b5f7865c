"""Does the fit reach the global maximum? flawmix against scipy's L-BFGS-B from 20 random
starts (tests/test_robustness.py) on seeded random campaigns (flawmix/campaigns.py).

Usage: python studies/global_maximum.py [first_seed] [count]
"""
import sys
import warnings
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]   # this checkout, not an installed copy
import flawmix as fm  # noqa: E402
from flawmix.campaigns import random_campaign  # noqa: E402
from test_robustness import multistart_reference  # noqa: E402


def main(first=2000, count=300):
    shortfall, refused, not_converged = [], 0, 0
    for seed in range(first, first + count):
        campaign = random_campaign(seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", fm.FlawmixWarning)
            try:
                result = fm.fit(campaign.specimens, intervals="none")
            except fm.FlawmixError:
                refused += 1
                continue
        not_converged += not result.converged
        gap = multistart_reference(campaign.specimens) - result.log_likelihood
        shortfall.append(gap)
        if gap > 1e-4:
            print(f"seed {seed}: flawmix {gap:.4g} below the multi-start maximum", flush=True)
    s = np.array(shortfall)
    print(f"seeds {first}..{first + count - 1}: {s.size} fitted, {refused} refused (a population without "
          f"failures), {not_converged} not converged; shortfall > 1e-4: {(s > 1e-4).sum()}, "
          f"max shortfall {s.max():.3g}, flawmix higher by up to {-s.min():.3g}")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
