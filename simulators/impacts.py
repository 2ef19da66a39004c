"""When a spall is struck, and how hard: the impact times of one bearing defect.

Impact k of a defect with rate ``order`` (impacts per shaft revolution, from
:mod:`rotorwatch.simulators.rates`) happens when the shaft has turned ``(k + delta_k) / order``
revolutions. ``delta_k`` is the slip: the inter-impact period varies randomly by ``jitter`` (a fraction
of the period, std), so the offsets are a random walk; it is drawn in blocks of 1024 impacts and tied
to zero at every block edge (a Brownian bridge), which keeps the long-term rate exactly kinematic and
lets any impact be found without drawing the ones before it. Each impact's size factor combines a
log-normal scatter (``scatter``, mean 1) with the load zone: an inner-race spall turns with the shaft
through the stationary load zone, a spalled element travels with the cage (FTF); an outer-race spall is
taken to sit in the load zone (factor 1).

Slip of 1-2 % of the period: Randall & Antoni 2011 section 2, Smith & Randall 2015 (secondary).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from .components import load_zone_factor
from .randomness import generator, stream_key
from .speed import SpeedModel

BLOCK = 1024  # impacts per jitter block


@lru_cache(maxsize=256)
def _block(seed: int, key: int, index: int, jitter: float, scatter: float) -> tuple[np.ndarray, np.ndarray]:
    rng = generator(seed, key, index)
    steps = rng.standard_normal(BLOCK) * jitter
    offsets = np.concatenate(([0.0], np.cumsum(steps - steps.mean())[:-1]))
    sigma = math.log1p(scatter ** 2) ** 0.5  # log-normal with mean 1 and relative std `scatter`
    sizes = np.exp(sigma * rng.standard_normal(BLOCK) - 0.5 * sigma ** 2)
    offsets.flags.writeable = False
    sizes.flags.writeable = False
    return offsets, sizes


class ImpactTrain:
    """Impacts of one defect (``outer_race``, ``inner_race`` or ``ball``) of one bearing."""

    def __init__(self, defect: str, impact_order: float, load_order: float, *, jitter: float, scatter: float,
                 load_zone_depth: float, seed: int, name: str):
        self.defect = defect
        self.impact_order = impact_order
        self.load_order = load_order
        self.jitter = jitter
        self.scatter = scatter
        self.depth = load_zone_depth if defect != "outer_race" else 0.0
        self.seed = seed
        self._key = stream_key("impacts", name, defect)
        self.zone_phase_rad = generator(seed, stream_key("load-zone", name, defect)).uniform(0, 2 * math.pi)

    def events(self, speed: SpeedModel, t_a_s: float, t_b_s: float) -> tuple[np.ndarray, np.ndarray]:
        """Impact times (s) in [t_a_s, t_b_s) and their size factors (multiply by the severity)."""
        c_a = self.impact_order * float(speed.turns(t_a_s))
        c_b = self.impact_order * float(speed.turns(t_b_s))
        k0, k1 = math.floor(c_a) - 8, math.ceil(c_b) + 8
        ks, offs, sizes = [], [], []
        for b in range(k0 // BLOCK, k1 // BLOCK + 1):
            lo, hi = max(k0, b * BLOCK), min(k1, (b + 1) * BLOCK)
            if hi <= lo:
                continue
            o, s = _block(self.seed, self._key, b, self.jitter, self.scatter)
            ks.append(np.arange(lo, hi))
            offs.append(o[lo - b * BLOCK:hi - b * BLOCK])
            sizes.append(s[lo - b * BLOCK:hi - b * BLOCK])
        k = np.concatenate(ks).astype(float)
        target_turns = (k + np.concatenate(offs)) / self.impact_order
        times = speed.time_at_turns(target_turns)
        keep = (times >= t_a_s) & (times < t_b_s)
        times, factor = times[keep], np.concatenate(sizes)[keep]
        if self.depth > 0:
            angle = 2.0 * math.pi * ((self.load_order * speed.turns(times)) % 1.0) + self.zone_phase_rad
            factor = factor * load_zone_factor(angle, self.depth)
        return times, factor
