"""Manning's n scaled per land-cover class: roughness cases and calibration multipliers.

The same sections are solved again with every class's n multiplied by a factor:

- roughness cases: case ``"low"`` gives each class the factor n_low / n, ``"high"`` n_high / n, so
  the whole reach takes the minimum or maximum of the range its table gives (the envelope runs of
  sensitivity practice; ranges such as Chow 1959, *Open-Channel Hydraulics*, Table 5-6). A class
  without n_low / n_high keeps its n (factor 1); so do land-cover gaps filled with default_n.
- calibration: one multiplier per group of classes (:func:`group_members`).

A factor applies to every n of its class: the base n of its segments and, when the class has an
``n_by_depth`` or ``n_by_discharge`` law, every n of the law (the law keeps its shape and is moved
to the case's range: n_law_case(x) = n_law(x) n_low / n). Factors of cases and multipliers compose
by product. Pure numpy; ``classes`` maps class name -> an object with ``n``, ``n_low``, ``n_high``
and the law tuples (e.g. :class:`geoflow.config.RoughnessClass`).
"""
from __future__ import annotations

import dataclasses
from collections.abc import Mapping

import numpy as np

CASES = ("normal", "low", "high")
_RANGE_KEY = {"low": "n_low", "high": "n_high"}


def case_factors(classes: Mapping, case: str) -> dict[str, float]:
    """{class: n_case / n} of the classes that give the case's value; "normal" gives {}."""
    if case == "normal":
        return {}
    key = _RANGE_KEY[case]
    return {name: getattr(c, key) / c.n for name, c in classes.items() if getattr(c, key) is not None}


def classes_without_range(classes: Mapping, case: str) -> list[str]:
    """Classes that keep their n in ``case`` (no n_low for "low", no n_high for "high"), sorted."""
    if case == "normal":
        return []
    key = _RANGE_KEY[case]
    return sorted(name for name, c in classes.items() if getattr(c, key) is None)


def group_name(group) -> str:
    """"channel", "floodplain", or the class names of a list joined by "+"."""
    return group if isinstance(group, str) else "+".join(group)


def group_members(adjust, channel_class: str, present) -> dict[str, tuple[str, ...]]:
    """{group name: classes} for the calibration groups ``adjust``.

    "channel" is the channel class; "floodplain" is every class in ``present`` (the land-cover
    classes, "" for land-cover gaps) other than the channel class and the classes a list names;
    a list is its own classes. Classes in no group keep their n.
    """
    listed = {c for g in adjust if not isinstance(g, str) for c in g}
    out = {}
    for g in adjust:
        if g == "channel":
            out[g] = (channel_class,)
        elif g == "floodplain":
            out[g] = tuple(sorted(c for c in set(present) if c != channel_class and c not in listed))
        else:
            out[group_name(g)] = tuple(g)
    return out


def group_factors(members: Mapping[str, tuple[str, ...]], multipliers: Mapping[str, float]) -> dict[str, float]:
    """{class: multiplier of its group} for the groups given in ``multipliers``."""
    return {c: float(multipliers[g]) for g, classes in members.items() if g in multipliers for c in classes}


def combine(*factors: Mapping[str, float]) -> dict[str, float]:
    """Product of per-class factor mappings (a class missing from one has factor 1 there)."""
    out: dict[str, float] = {}
    for f in factors:
        for c, v in f.items():
            out[c] = out.get(c, 1.0) * float(v)
    return out


def segment_factors(section, class_factor: Mapping[str, float]) -> np.ndarray:
    """Factor per segment of ``section`` from its land-cover class (1 for classes not given)."""
    cover = np.asarray(section.landcover).astype(str)
    out = np.ones(cover.shape, dtype=float)
    for name, f in class_factor.items():
        out[cover == name] = f
    return out


def scaled_section(section, class_factor: Mapping[str, float]):
    """The section with its base n per segment multiplied by its class's factor."""
    if not class_factor:
        return section
    return dataclasses.replace(section, n=np.asarray(section.n, dtype=float) * segment_factors(section, class_factor))


def scaled_classes(classes: Mapping, class_factor: Mapping[str, float]) -> dict:
    """The class table with n, n_low, n_high and every n of the laws multiplied by the class's factor."""
    out = {}
    for name, c in classes.items():
        f = float(class_factor.get(name, 1.0))
        if f == 1.0:
            out[name] = c
            continue
        law = {k: tuple((x, n * f) for x, n in getattr(c, k, ())) for k in ("n_by_depth", "n_by_discharge")}
        rng = {k: (None if getattr(c, k) is None else getattr(c, k) * f) for k in ("n_low", "n_high")}
        out[name] = dataclasses.replace(c, n=c.n * f, **rng, **law)
    return out
