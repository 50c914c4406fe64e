import os
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
if ROOT not in sys.path:
    sys.path.insert(0, ROOT)
TESTS = os.path.dirname(os.path.abspath(__file__))
if TESTS not in sys.path:
    sys.path.insert(0, TESTS)

# Hypothesis: no test depends on the wall clock.  The default 200 ms deadline per example would fail
# a test on a loaded machine, so every profile sets ``deadline=None``; each property test also states
# its own bounded ``max_examples`` (and ``deadline=None``) in its ``@settings``.  ``make test`` uses
# the profile ``limbclock`` (random examples, so new inputs are tried over time); the mutation check
# (``tests/mutants.py``) selects ``mutants`` through LIMBCLOCK_HYPOTHESIS_PROFILE: the same examples
# on every run and no example database, so a mutant is caught or not the same way each time.
from hypothesis import settings as _hyp_settings  # noqa: E402

_hyp_settings.register_profile("limbclock", deadline=None)
_hyp_settings.register_profile("mutants", deadline=None, derandomize=True, database=None)
_hyp_settings.load_profile(os.environ.get("LIMBCLOCK_HYPOTHESIS_PROFILE", "limbclock"))
