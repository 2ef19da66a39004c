"""Robust baselines of the healthy machine: learned once, kept on disk, re-learned on request.

Each trended value of each point (a band, or ``overall``) learns its own baseline from the updates of
the running, healthy-sensor machine: from its first such update until ``AlarmPolicy.learning_hours``
have passed *and* at least ``min_learning_updates`` updates were seen. The baseline is the median and
the median absolute deviation (MAD) of those values, robust to the odd outlier (a door slam, a passing
truck) in a way a mean and standard deviation are not.

Memory stays bounded: at most ``max_samples`` values are kept per entry, by keeping every value, then
every 2nd, every 4th... (the kept values stay evenly spread over the learning period).

Baselines live in ``<state_dir>/baselines/<machine_id>.json``, written atomically (temporary file +
``os.replace``), and are reloaded at start so a restart does not re-learn. Each entry carries a hash of
the definition of its value (the band placement and quantity, the analysis settings, the sensor, the
bearing geometry or blade count it depends on, but not its alarm levels): a changed definition re-learns,
a changed level does not. An unreadable file is moved aside (``.corrupt-<time>``), never deleted.

Writes: a learned or reset baseline is saved at once; learning progress (the kept samples) at most
every ``checkpoint_s`` of update time (default an hour: during learning the file can reach several
hundred kB for a four-point machine, and an SD card should not get it every ten minutes; a power
cut loses at most that much learning progress, never a learned baseline). Nothing is written once
every value is learned. Clock steps: learning time is the sum of the forward steps between updates,
so a clock stepped back neither stalls learning nor loses what was covered; a step forward counts as
time covered (the ``min_learning_updates`` bound still holds; relearn if it came during learning).

The same file keeps, per point whose demodulation band is searched, the band chosen on the first update
of its learning (``envelope_bands``): the analysis then demodulates in that band on every update instead
of searching again, so envelope values stay comparable from update to update, whatever order or
process analyses them. The kept band is part of the envelope values' definition; relearning a point (all
its values) forgets it and the next update searches again.
"""

from __future__ import annotations

import hashlib
import json
import logging
import math
import os
import tempfile
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..durable import fsync_dir
from ..errors import ConfigError
from ..settings.models import AlarmPolicy, FeatureBand, Machine
from ..settings.quantities import quantity
from .levels import Baseline

log = logging.getLogger(__name__)

FORMAT = 1
OVERALL = "overall"


@dataclass
class Entry:
    """Learning state of one value (mutable; persisted as JSON)."""

    definition_hash: str
    status: str = "learning"  # learning | learned
    first_s: float | None = None
    last_s: float | None = None
    n_seen: int = 0
    stride: int = 1
    samples: list[float] = field(default_factory=list)
    median: float | None = None
    mad: float | None = None
    learned_at_s: float | None = None
    covered_s: float | None = None  # learning time seen: the sum of forward steps between updates

    @property
    def hours(self) -> float:
        """Hours of learning covered. Steps back of the clock add nothing (and do not stall the
        learning); files written before ``covered_s`` existed count from first to last update."""
        if self.covered_s is not None:
            return self.covered_s / 3600.0
        return 0.0 if self.first_s is None or self.last_s is None else max(0.0, self.last_s - self.first_s) / 3600.0

    @property
    def baseline(self) -> Baseline | None:
        if self.status != "learned" or self.median is None or self.mad is None:
            return None
        return Baseline(self.median, self.mad, self.n_seen)


def definition(machine: Machine, point_id: str, value_name: str) -> dict[str, Any]:
    """Everything a value's numbers depend on, except its alarm levels."""
    point = machine.point(point_id)
    out: dict[str, Any] = {
        "value": value_name,
        # how often a kept envelope band is reviewed changes no number
        "analysis": machine.analysis.model_dump(mode="json", exclude={"envelope": {"band_review_hours"}}),
        "sensor": point.sensor.model_dump(mode="json", exclude={"direction"}),
    }
    if value_name == OVERALL:
        out["overall"] = machine.overall.model_dump(mode="json", exclude={"levels"})
        return out
    band = next(b for b in machine.bands if b.name == value_name)
    out["band"] = band.model_dump(mode="json", exclude={"levels", "points"})
    if isinstance(band, FeatureBand) and band.bearing is not None:
        out["bearing"] = machine.bearing(band.bearing).model_dump(mode="json", exclude={"name"})
    if isinstance(band, FeatureBand) and band.feature == "blade_pass":
        out["blades"] = machine.blades
    return out


def definition_hash(machine: Machine, point_id: str, value_name: str,
                    envelope_band_hz: tuple[float, float] | None = None) -> str:
    """Hash of a value's definition; an envelope value on a searched band also hashes the band the point
    keeps (``envelope_band_hz``), so a band chosen anew re-learns the envelope values."""
    doc = definition(machine, point_id, value_name)
    if envelope_band_hz is not None:
        doc["kept_envelope_band_hz"] = [round(float(x), 3) for x in envelope_band_hz]
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:16]


def band_definition_hash(machine: Machine, point_id: str) -> str:
    """What a searched envelope band's choice depends on: the envelope settings and the point's sensor."""
    point = machine.point(point_id)
    doc = {"envelope": machine.analysis.envelope.model_dump(mode="json", exclude={"band_review_hours"}),
           "sensor": point.sensor.model_dump(mode="json", exclude={"direction"})}
    text = json.dumps(doc, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:16]


@dataclass
class KeptBand:
    """The demodulation band a point keeps when its band is searched (persisted with the baselines)."""

    definition_hash: str
    band_hz: list[float]
    chosen_at_s: float
    criterion: str
    score: float | None = None  # the search criterion's score of the band when it was chosen


def robust_stats(samples: list[float] | np.ndarray) -> tuple[float, float]:
    """(median, MAD) of the samples."""
    x = np.asarray(samples, dtype=float)
    med = float(np.median(x))
    return med, float(np.median(np.abs(x - med)))


class BaselineStore:
    """Baselines of one machine's values, learned from updates and kept in ``state_dir``.

    ``state_dir=None`` keeps everything in memory (nothing survives the object).
    """

    def __init__(
        self,
        machine: Machine,
        state_dir: str | Path | None,
        policy: AlarmPolicy | None = None,
        *,
        max_samples: int = 1024,
        checkpoint_s: float = 3600.0,
    ):
        if max_samples < 2:
            raise ValueError(f"max_samples = {max_samples}: must be at least 2")
        self.machine = machine
        self.policy = policy if policy is not None else machine.alarms
        self.max_samples = max_samples
        self.checkpoint_s = checkpoint_s
        self.entries: dict[str, Entry] = {}
        self.bands: dict[str, KeptBand] = {}  # point id -> kept envelope band (searched bands only)
        self._hashes: dict[str, str] = {}
        self._dirty = False
        self._urgent = False  # a baseline was learned or reset: save at the next checkpoint
        self._saved_at_s: float | None = None
        self.path: Path | None = None
        if state_dir is not None:
            folder = Path(state_dir) / "baselines"
            try:
                folder.mkdir(parents=True, exist_ok=True)
            except OSError as e:
                raise ConfigError([f"storage.state_dir = {str(state_dir)!r}: cannot create {folder}: {e.strerror}"]) from None
            self.path = folder / f"{machine.id}.json"
            self._load()

    # ------------------------------------------------------------------------------------------- keys
    @staticmethod
    def key(point_id: str, value_name: str) -> str:
        return f"{point_id}/{value_name}"

    def _hash(self, point_id: str, value_name: str) -> str:
        k = self.key(point_id, value_name)
        if k not in self._hashes:
            band = self.envelope_band(point_id) if self._on_kept_band(value_name) else None
            self._hashes[k] = definition_hash(self.machine, point_id, value_name, band)
        return self._hashes[k]

    def _on_kept_band(self, value_name: str) -> bool:
        if self.machine.analysis.envelope.band_hz is not None:
            return False
        return any(b.name == value_name and quantity(b.quantity).demodulated for b in self.machine.bands)

    # ------------------------------------------------------------------------------- envelope band
    def envelope_band(self, point_id: str) -> tuple[float, float] | None:
        """The searched demodulation band ``point_id`` keeps, or None (not chosen yet, or chosen under
        other envelope settings or another sensor)."""
        kept = self.bands.get(point_id)
        if kept is None or kept.definition_hash != band_definition_hash(self.machine, point_id):
            return None
        return (float(kept.band_hz[0]), float(kept.band_hz[1]))

    def keep_envelope_band(self, point_id: str, band_hz: tuple[float, float], time_s: float, criterion: str,
                           score: float | None = None) -> None:
        """Keep ``band_hz`` as the point's demodulation band (saved at the next checkpoint)."""
        self.bands[point_id] = KeptBand(band_definition_hash(self.machine, point_id),
                                        [float(band_hz[0]), float(band_hz[1])], float(time_s), criterion,
                                        None if score is None or not math.isfinite(score) else float(score))
        self._forget_hashes(point_id)
        self._dirty = self._urgent = True
        log.info("envelope band kept machine=%s point=%s band=%.0f-%.0f Hz criterion=%s",
                 self.machine.id, point_id, band_hz[0], band_hz[1], criterion)

    def _forget_hashes(self, point_id: str) -> None:
        for k in [k for k in self._hashes if k.startswith(f"{point_id}/")]:
            del self._hashes[k]

    def _entry(self, point_id: str, value_name: str) -> Entry:
        k = self.key(point_id, value_name)
        h = self._hash(point_id, value_name)
        e = self.entries.get(k)
        if e is None or e.definition_hash != h:
            if e is not None:
                log.info("baseline definition changed, re-learning key=%s", k)
            e = Entry(definition_hash=h)
            self.entries[k] = e
            self._dirty = True
        return e

    # ---------------------------------------------------------------------------------------- queries
    def baseline(self, point_id: str, value_name: str) -> Baseline | None:
        return self._entry(point_id, value_name).baseline

    def is_learned(self, point_id: str, value_name: str) -> bool:
        return self._entry(point_id, value_name).status == "learned"

    def progress(self, point_id: str, value_name: str) -> tuple[int, float]:
        """(updates seen, hours covered) of a value's learning."""
        e = self._entry(point_id, value_name)
        return e.n_seen, e.hours

    # --------------------------------------------------------------------------------------- learning
    def add(self, point_id: str, value_name: str, x: float, time_s: float) -> Baseline | None:
        """Feed one value of a running machine with a healthy sensor.

        Returns the baseline when this value completed the learning, else None. Values of entries
        already learned, and non-finite values, are ignored. Call :meth:`checkpoint` after each update
        to write what was learned to disk.
        """
        e = self._entry(point_id, value_name)
        if e.status == "learned" or not math.isfinite(x):
            return None
        if e.first_s is None:
            e.first_s = time_s
        if e.covered_s is None:
            e.covered_s = e.hours * 3600.0
        if e.last_s is not None:
            e.covered_s += max(0.0, time_s - e.last_s)  # a clock stepped back adds nothing
        e.last_s = time_s
        if e.n_seen % e.stride == 0:
            e.samples.append(float(x))
            if len(e.samples) > self.max_samples:
                e.samples = e.samples[::2]
                e.stride *= 2
        e.n_seen += 1
        self._dirty = True
        hours = e.hours
        if hours + 1e-9 >= self.policy.learning_hours and e.n_seen >= self.policy.min_learning_updates:
            e.median, e.mad = robust_stats(e.samples)
            e.status = "learned"
            e.learned_at_s = time_s
            e.samples = []
            log.info(
                "baseline learned machine=%s key=%s median=%.6g mad=%.6g n=%d hours=%.2f",
                self.machine.id, self.key(point_id, value_name), e.median, e.mad, e.n_seen, hours,
            )
            self._urgent = True
            return e.baseline
        return None

    def relearn(self, point_id: str | None = None, value_name: str | None = None) -> list[str]:
        """Forget the baselines of the chosen values (all by default) and learn them again.

        Returns the keys reset.
        """
        reset = []
        for p in self.machine.points:
            if point_id is not None and p.id != point_id:
                continue
            if value_name is None and self.bands.pop(p.id, None) is not None:
                self._forget_hashes(p.id)  # the band is searched again on the point's next update
                log.info("envelope band forgotten machine=%s point=%s", self.machine.id, p.id)
            names = [OVERALL] + [b.name for b in self.machine.bands_for(p.id)]
            for name in names:
                if value_name is not None and name != value_name:
                    continue
                k = self.key(p.id, name)
                self.entries[k] = Entry(definition_hash=self._hash(p.id, name))
                reset.append(k)
        if reset:
            self._dirty = True
            log.info("baselines reset machine=%s keys=%s", self.machine.id, ",".join(reset))
            self.save()
        return reset

    # ------------------------------------------------------------------------------------ persistence
    def checkpoint(self, time_s: float) -> None:
        """Save after an update: at once when a baseline was learned, else learning progress every
        ``checkpoint_s`` of update time."""
        if not self._dirty:
            return
        # abs(): a clock stepped back by more than an interval saves too, rather than waiting to catch up
        if self._urgent or self._saved_at_s is None or abs(time_s - self._saved_at_s) >= self.checkpoint_s:
            self.save()
            self._saved_at_s = time_s

    def save(self) -> None:
        """Write the baselines atomically. A failed write is logged; the baselines stay in memory."""
        if self.path is None:
            self._dirty = self._urgent = False
            return
        doc = {
            "format": FORMAT,
            "machine_id": self.machine.id,
            "saved_unix_s": time.time(),
            "entries": {k: asdict(e) for k, e in sorted(self.entries.items())},
            "envelope_bands": {k: asdict(b) for k, b in sorted(self.bands.items())},
        }
        tmp = None
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".{self.path.name}.", suffix=".tmp", dir=self.path.parent)
            with os.fdopen(fd, "w", encoding="utf-8") as f:
                json.dump(doc, f, indent=1, allow_nan=False)
                f.flush()
                os.fsync(f.fileno())
            os.replace(tmp, self.path)
            tmp = None
            fsync_dir(self.path.parent)  # the rename itself reaches the disk before we count it saved
            self._dirty = self._urgent = False
        except (OSError, ValueError) as e:
            log.error("cannot save baselines path=%s error=%s", self.path, e)
        finally:
            if tmp is not None:
                try:
                    os.unlink(tmp)
                except OSError:
                    pass

    def _load(self) -> None:
        assert self.path is not None
        for stale in self.path.parent.glob(f".{self.path.name}.*.tmp"):  # a save cut short by a crash
            try:
                stale.unlink()
            except OSError:
                pass
        if not self.path.exists():
            return
        try:
            doc = json.loads(self.path.read_text(encoding="utf-8"))
            if not isinstance(doc, dict) or doc.get("format") != FORMAT:
                raise ValueError(f"format {doc.get('format') if isinstance(doc, dict) else None!r}, expected {FORMAT}")
            entries = {str(k): Entry(**v) for k, v in doc.get("entries", {}).items()}
            bands = {str(k): KeptBand(**v) for k, v in doc.get("envelope_bands", {}).items()}
        except (OSError, ValueError, TypeError) as e:
            aside = self.path.with_name(f"{self.path.name}.corrupt-{int(time.time())}")
            log.warning("baselines unreadable, moved aside path=%s to=%s error=%s", self.path, aside, e)
            try:
                os.replace(self.path, aside)
            except OSError:
                pass
            return
        self.entries = entries
        self.bands = bands
        self._hashes.clear()
        learned = sum(1 for e in entries.values() if e.status == "learned")
        log.info("baselines loaded machine=%s path=%s learned=%d of %d", self.machine.id, self.path, learned, len(entries))
