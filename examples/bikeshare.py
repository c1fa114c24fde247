"""An invented study: a city bike-share cooperative asks which annual memberships will be renewed.

Everything here is made up (members, districts, rides); nothing describes real people or places. A seeded
generator writes two monthly drops of two linked tables:

- ``members``: one row per member (key ``member_id``): age, home district (many levels), sign-up channel
  (with inconsistent case), joined date, a satisfaction score on a 1-5 scale with -99 "not answered" and
  -98 "don't know", a contact e-mail (a direct identifier), and the target ``renewed`` (imbalanced).
- ``rides``: one row per ride (key ``ride_id``), ``member_id`` referring to members, start and end times,
  duration in minutes, distance in km, bike type.

The second drops carry the faults real deliveries carry, and :func:`write_drops` returns a manifest of
exactly what was planted, so that the demo's findings can be checked against it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

DISTRICTS = [
    "Alder Row", "Beacon Hill", "Brickfield", "Canal Side", "Cedar Park", "Clover Bank", "Copper Lane",
    "Dovecote", "Eastwick Yards", "Elm Terrace", "Fernvale", "Foundry", "Glassworks", "Harbourside",
    "Hollow Oak", "Juniper Fields", "Kestrel Point", "Lantern Quarter", "Millbrook", "Old Tannery",
    "Orchard Gate", "Pebble Strand", "Quarry End", "Riverside Mews", "Saltmarsh", "Tinker's Cross",
]
CHANNELS = ["app", "web", "kiosk", "partner"]
BIKE_TYPES = ["classic", "electric", "cargo"]
DATETIME = "%Y-%m-%d %H:%M"
OTHER_DATETIME = "%d/%m/%Y %H:%M"


@dataclass
class Manifest:
    """What the generator planted in the second drops: findings by table and rule, record changes."""

    files: dict[str, Path] = field(default_factory=dict)
    # {table: {rule: {variable: offending rows}}}; the variable is None for row-level rules
    faults: dict[str, dict[str, dict[str | None, int]]] = field(default_factory=dict)
    records: dict[str, dict[str, int]] = field(default_factory=dict)
    shifted: dict[str, str] = field(default_factory=dict)

    def plant(self, table: str, rule: str, variable: str | None, count: int) -> None:
        self.faults.setdefault(table, {}).setdefault(rule, {})[variable] = count

    def to_dict(self) -> dict[str, Any]:
        return {
            "files": {k: str(v) for k, v in self.files.items()},
            "faults": {t: {r: {str(v): c for v, c in by.items()} for r, by in rules.items()}
                       for t, rules in self.faults.items()},
            "records": self.records,
            "shifted": self.shifted,
        }


def _members(rng, ids, start_day):  # type: ignore[no-untyped-def]
    import numpy as np
    import pandas as pd

    n = len(ids)
    age = np.clip(np.round(rng.normal(41, 13, n)), 18, 88).astype(int)
    district = rng.choice(DISTRICTS, n, p=_zipf(len(DISTRICTS)))
    channel = rng.choice(CHANNELS, n, p=[0.55, 0.25, 0.12, 0.08])
    joined = pd.Timestamp(start_day) - pd.to_timedelta(rng.integers(30, 1500, n), unit="D")
    satisfaction = rng.choice([1, 2, 3, 4, 5, -99, -98], n, p=[0.05, 0.1, 0.2, 0.33, 0.22, 0.06, 0.04])
    # renewal depends on satisfaction and age, so the target is learnable but imbalanced (about 4:1)
    logit = 0.9 + 0.45 * np.where(satisfaction > 0, satisfaction - 3, 0) + 0.01 * (age - 40)
    renewed = np.where(rng.random(n) < 1 / (1 + np.exp(-logit)), "yes", "no")
    numbers = np.char.zfill(np.array([i[2:] for i in ids]), 5)
    email = np.char.add(np.char.add("member", numbers), "@example.org")
    return pd.DataFrame(
        {
            "member_id": ids,
            "age": age,
            "district": district,
            "signup_channel": channel,
            "joined_on": joined.strftime("%Y-%m-%d"),
            "satisfaction": satisfaction,
            "email": email,
            "renewed": renewed,
        }
    )


def _zipf(k: int) -> list[float]:
    weights = [1 / (rank + 1) ** 0.6 for rank in range(k)]
    total = sum(weights)
    return [w / total for w in weights]


def _rides(rng, first_id, n, member_ids, month_start, duration_scale):  # type: ignore[no-untyped-def]
    import numpy as np
    import pandas as pd

    ride_ids = np.array([f"R-{i:06d}" for i in range(first_id, first_id + n)])
    members = rng.choice(member_ids, n)
    start = pd.Timestamp(month_start) + pd.to_timedelta(rng.integers(0, 27 * 24 * 60, n), unit="min")
    duration = np.round(rng.gamma(2.2, 7.5 * duration_scale, n) + 2, 1)
    end = start + pd.to_timedelta(np.ceil(duration), unit="min")
    bike = rng.choice(BIKE_TYPES, n, p=[0.6, 0.33, 0.07])
    speed = np.where(bike == "electric", 0.28, 0.22)
    distance = np.round(duration * speed * rng.uniform(0.6, 1.2, n), 2)
    return pd.DataFrame(
        {
            "ride_id": ride_ids,
            "member_id": members,
            "started_at": start.strftime(DATETIME),
            "ended_at": end.strftime(DATETIME),
            "duration_min": duration,
            "distance_km": distance,
            "bike_type": bike,
        }
    )


def write_drops(folder: str | Path, seed: int = 2026, members: int = 2000, rides: int = 8000) -> Manifest:
    """Write ``members-2026-01.csv``, ``rides-2026-01.csv`` and their February drops into ``folder``."""
    import numpy as np

    rng = np.random.default_rng(seed)
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    manifest = Manifest()

    ids = np.array([f"M-{i:05d}" for i in range(1, members + 1)])
    jan = _members(rng, ids, "2026-01-01")
    jan_rides = _rides(rng, 1, rides, ids, "2026-01-01", 1.0)

    # February members: 40 left, 150 joined, 60 records corrected by the provider
    removed = rng.choice(members, 40, replace=False)
    feb = jan.drop(index=removed).reset_index(drop=True)
    corrected = rng.choice(len(feb), 60, replace=False)
    feb.loc[corrected[:30], "age"] = feb.loc[corrected[:30], "age"] + 1
    shifted_district = feb.loc[corrected[30:], "district"].map(
        lambda d: DISTRICTS[(DISTRICTS.index(d) + 1) % len(DISTRICTS)]
    )
    feb.loc[corrected[30:], "district"] = shifted_district
    new_ids = np.array([f"M-{i:05d}" for i in range(members + 1, members + 151)])
    joined = _members(rng, new_ids, "2026-02-01")

    # faults, all on rows of new members so that the corrected-record count stays exact
    joined.loc[0:6, "district"] = "Northgate Quay"  # a level the dictionary does not know
    joined.loc[7:11, "signup_channel"] = "App"  # case variant
    joined.loc[12:15, "signup_channel"] = " web"  # whitespace variant
    joined.loc[16:18, "age"] = 999  # a sentinel the dictionary does not declare
    joined.loc[19:22, "email"] = "not given"  # breaks the e-mail pattern
    feb = feb.astype({"age": object})
    feb = _concat(feb, joined)
    # the provider delivered two member records twice, with different satisfaction scores
    twice = joined.iloc[[30, 31]].copy()
    twice["satisfaction"] = np.where(twice["satisfaction"] == 5, 1, 5)
    feb = _concat(feb, twice)
    manifest.plant("members", "level", "district", 7)
    manifest.plant("members", "level", "signup_channel", 9)
    manifest.plant("members", "range", "age", 3)
    manifest.plant("members", "pattern", "email", 4)
    manifest.plant("members", "key", "member_id", 2)
    manifest.records["members"] = {"new": 150, "vanished": 40, "changed": 60}

    # February rides: longer rides (a shift), another date format, end before start, unknown members,
    # a repeated row, and distance delivered under its new name
    feb_rides = _rides(rng, rides + 1, rides, feb["member_id"].to_numpy(), "2026-02-01", 1.45)
    other_format = np.arange(0, 12)
    import pandas as pd

    feb_rides.loc[other_format, "started_at"] = pd.to_datetime(
        feb_rides.loc[other_format, "started_at"], format=DATETIME
    ).dt.strftime(OTHER_DATETIME)
    backwards = np.arange(20, 26)
    start = pd.to_datetime(feb_rides.loc[backwards, "started_at"], format=DATETIME)
    feb_rides.loc[backwards, "ended_at"] = (start - pd.Timedelta(minutes=9)).dt.strftime(DATETIME)
    feb_rides.loc[backwards, "duration_min"] = -9.0
    unknown = np.arange(40, 48)
    feb_rides.loc[unknown, "member_id"] = [f"M-9{i:04d}" for i in range(len(unknown))]
    feb_rides = _concat(feb_rides, feb_rides.iloc[[60, 61, 62]])
    feb_rides = feb_rides.rename(columns={"distance_km": "distance"})
    manifest.plant("rides", "type", "started_at", 12)
    manifest.plant("rides", "range", "duration_min", 6)
    manifest.plant("rides", "end-after-start", None, 6)
    manifest.plant("rides", "orphan", "member_id", 8)
    manifest.plant("rides", "repeated-row", None, 3)
    manifest.plant("rides", "key", "ride_id", 3)
    manifest.plant("rides", "renamed-column", "distance_km", 1)
    manifest.records["rides"] = {"new": rides, "vanished": rides, "changed": 0}
    manifest.shifted["rides"] = "duration_min"

    for name, frame in {
        "members-2026-01.csv": jan,
        "rides-2026-01.csv": jan_rides,
        "members-2026-02.csv": feb,
        "rides-2026-02.csv": feb_rides,
    }.items():
        path = out / name
        frame.to_csv(path, index=False)
        manifest.files[name] = path
    return manifest


def _concat(a, b):  # type: ignore[no-untyped-def]
    import pandas as pd

    return pd.concat([a, b], ignore_index=True)


if __name__ == "__main__":
    import json
    import sys

    result = write_drops(sys.argv[1] if len(sys.argv) > 1 else "bikeshare-drops")
    print(json.dumps(result.to_dict(), indent=2))
