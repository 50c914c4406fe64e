"""The engine's cooperative hook (engine/coop.py): a reduction calls it at every model evaluation,
so a caller (the timer's main loop) can serve its inputs between slices of the work."""
import json
import os

import engine
from engine import coop

HERE = os.path.dirname(os.path.abspath(__file__))
SESSION = os.path.join(HERE, "..", "vectors", "sessions", "morning_run.json")


def test_reduction_calls_the_hook_and_gives_the_same_fix():
    with open(SESSION) as f:
        text = f.read()
    plain = engine.reduce_session(text)
    calls = []
    prev = coop.set_hook(lambda: calls.append(1))
    try:
        hooked = engine.reduce_session(text)
    finally:
        coop.set_hook(prev)
    n = len(json.loads(text)["contacts"])
    # at least one model evaluation per contact and iteration: many slices, not one
    assert len(calls) >= 2 * n
    assert (hooked["lat_deg"], hooked["lon_deg"]) == (plain["lat_deg"], plain["lon_deg"])
