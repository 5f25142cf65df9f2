"""The invented region of the demo: country codes, coordinates and static dyad attributes.

Codes come from the ISO 3166-1 user-assigned alpha-3 ranges, so they can never be mistaken for a real
country. Coefficients are stylized facts of gravity models (common practice, no source), not estimates.
"""

from __future__ import annotations

import string
from dataclasses import dataclass

import numpy as np
import pandas as pd

EARTH_RADIUS_KM = 6371.0
CONTIGUITY_KM = 550.0  # pairs closer than this share a border (common practice, no source)
MIN_SEPARATION_KM = 160.0  # keeps capitals apart so that no distance is near zero
# The invented region lies over open ocean on purpose, so no point can be mistaken for a real place.
REGION_LAT = (-46.0, -16.0)  # about 3,300 km north-south
REGION_LON = (62.0, 96.0)  # and about 3,200 km east-west at its middle latitude


@dataclass(frozen=True)
class Region:
    origins: list[str]
    destinations: list[str]
    coordinates: pd.DataFrame  # country, lat, lon, role
    dyads: pd.DataFrame  # the dyad_attributes frame of the drop contract


def user_assigned_codes(first: str, second_from: str, count: int) -> list[str]:
    """`count` codes QMA, QMB, ... (or XAA, ...) walking the user-assigned block of letter `first`."""
    letters = string.ascii_uppercase
    codes = [first + b + c for b in letters[letters.index(second_from) :] for c in letters]
    if count > len(codes):
        raise ValueError(f"asked for {count} codes in block {first}{second_from}..; only {len(codes)} exist")
    return codes[:count]


def haversine_km(lat1: np.ndarray, lon1: np.ndarray, lat2: np.ndarray, lon2: np.ndarray) -> np.ndarray:
    """Great-circle distance on a sphere of radius 6371 km (the haversine formula)."""
    p1, p2 = np.radians(lat1), np.radians(lat2)
    dlat, dlon = p2 - p1, np.radians(lon2) - np.radians(lon1)
    a = np.sin(dlat / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dlon / 2) ** 2
    return 2 * EARTH_RADIUS_KM * np.arcsin(np.sqrt(np.clip(a, 0.0, 1.0)))


def _place(
    rng: np.random.Generator,
    n: int,
    lat: tuple[float, float],
    lon: tuple[float, float],
    taken: list[tuple[float, float]],
) -> list[tuple[float, float]]:
    """Rejection-sample points at least MIN_SEPARATION_KM from each other and from `taken`."""
    points: list[tuple[float, float]] = []
    for _ in range(200 * n):
        if len(points) == n:
            return points
        cand = (float(rng.uniform(*lat)), float(rng.uniform(*lon)))
        others = np.array(taken + points) if taken or points else np.empty((0, 2))
        if (
            len(others) == 0
            or haversine_km(others[:, 0], others[:, 1], cand[0], cand[1]).min() > MIN_SEPARATION_KM
        ):
            points.append(cand)
    raise ValueError(f"could not place {n} countries {MIN_SEPARATION_KM} km apart; use fewer countries")


def build_region(rng: np.random.Generator, n_origins: int, n_destinations: int) -> Region:
    """Origins sit in the interior; destinations spread over the region, a few origins host others too."""
    if n_origins < 2 or n_destinations < 2:
        raise ValueError(f"need at least 2 origins and 2 destinations, got {n_origins} and {n_destinations}")
    origins = user_assigned_codes("Q", "M", n_origins)
    n_shared = min(4, n_origins, n_destinations // 5)  # origins that also receive arrivals
    destinations = origins[:n_shared] + user_assigned_codes("X", "A", n_destinations - n_shared)
    lat_mid, lon_mid = np.mean(REGION_LAT), np.mean(REGION_LON)
    inner_lat = (lat_mid - 9.0, lat_mid + 9.0)
    inner_lon = (lon_mid - 10.0, lon_mid + 10.0)
    origin_pts = _place(rng, n_origins, inner_lat, inner_lon, [])
    dest_pts = _place(rng, n_destinations - n_shared, REGION_LAT, REGION_LON, origin_pts)
    coords = pd.DataFrame(
        {
            "country": origins + destinations[n_shared:],
            "lat": [p[0] for p in origin_pts + dest_pts],
            "lon": [p[1] for p in origin_pts + dest_pts],
            "role": ["origin"] * n_origins + ["destination"] * (n_destinations - n_shared),
        }
    )
    coords.loc[coords.country.isin(destinations[:n_shared]), "role"] = "both"
    return Region(origins, destinations, coords, _dyad_attributes(rng, origins, destinations, coords))


def _dyad_attributes(
    rng: np.random.Generator, origins: list[str], destinations: list[str], coords: pd.DataFrame
) -> pd.DataFrame:
    pairs = pd.DataFrame(
        [(o, d) for o in origins for d in destinations if o != d], columns=["origin", "destination"]
    )
    at = coords.set_index("country")
    o, d = at.loc[pairs.origin], at.loc[pairs.destination]
    dist = haversine_km(o.lat.to_numpy(), o.lon.to_numpy(), d.lat.to_numpy(), d.lon.to_numpy())
    contiguous = dist < CONTIGUITY_KM
    nearest = pd.Series(dist).groupby(pairs.origin.to_numpy()).idxmin().to_numpy()
    contiguous[nearest] = True  # every origin borders at least one destination
    # Language groups are spatially clustered: each country speaks the language of its nearest "centre".
    centres = rng.uniform([REGION_LAT[0], REGION_LON[0]], [REGION_LAT[1], REGION_LON[1]], size=(5, 2))
    lang = {
        c: int(np.argmin(haversine_km(centres[:, 0], centres[:, 1], r.lat, r.lon) + rng.normal(0, 300, 5)))
        for c, r in at.iterrows()
    }
    common_language = np.array(
        [lang[a] == lang[b] for a, b in zip(pairs.origin, pairs.destination, strict=True)]
    )
    colonial_tie = rng.random(len(pairs)) < 0.08
    log_diaspora = (
        8.0
        - 1.1 * np.log(dist / 500.0)
        + 1.0 * contiguous
        + 0.8 * common_language
        + 0.8 * colonial_tie
        + rng.normal(0.0, 1.2, len(pairs))
    )
    diaspora = np.where(rng.random(len(pairs)) < 0.12, 0.0, np.round(np.exp(log_diaspora)))
    return pairs.assign(
        distance_km=np.round(dist, 1),
        contiguous=contiguous.astype("int64"),
        common_language=common_language.astype("int64"),
        colonial_tie=colonial_tie.astype("int64"),
        diaspora=diaspora,
    )
