"""One helper for voxel size: a (dz, dy, dx) tuple in µm, checked."""

from __future__ import annotations

import math
from collections.abc import Iterable

from .errors import InputError

__all__ = ["as_spacing_um", "voxel_volume_um3"]


def as_spacing_um(value, *, name: str = "spacing_um") -> tuple[float, float, float]:
    """Normalise a voxel size to a 3-tuple ``(dz, dy, dx)`` of positive finite floats in µm.

    Parameters
    ----------
    value : float or sequence of 1 or 3 floats
        One value (isotropic voxels) or three values in z, y, x order, in micrometres.
    name : str
        Name of the parameter, used in error messages.

    Raises
    ------
    InputError
        If the value is missing, not numeric, of the wrong length, not finite or not positive.

    Examples
    --------
    >>> as_spacing_um(5)
    (5.0, 5.0, 5.0)
    >>> as_spacing_um("12,10,10")
    (12.0, 10.0, 10.0)
    """
    if value is None:
        raise InputError(
            f"{name} is missing: the voxel size is needed and ctpore never assumes one",
            "give it in µm, one value or three (z,y,x), e.g. --spacing 10 or --spacing 12,10,10",
        )
    if isinstance(value, str):
        parts = [p for p in value.replace(";", ",").replace(" ", ",").split(",") if p]
        try:
            values = [float(p) for p in parts]
        except ValueError:
            raise InputError(
                f"{name} {value!r} is not a number or a list of three numbers",
                "write one value in µm, or three as z,y,x, e.g. 12,10,10",
            ) from None
    elif isinstance(value, Iterable):
        try:
            values = [float(v) for v in value]
        except (TypeError, ValueError):
            raise InputError(f"{name} {value!r} holds non-numeric values",
                             "give numbers in µm") from None
    else:
        try:
            values = [float(value)]
        except (TypeError, ValueError):
            raise InputError(f"{name} {value!r} is not a number", "give a number in µm") from None
    if len(values) == 1:
        values = values * 3
    if len(values) != 3:
        raise InputError(
            f"{name} needs one value or three (z, y, x); got {len(values)}: {values}",
            "give one value in µm, or three as z,y,x",
        )
    if not all(math.isfinite(v) and v > 0 for v in values):
        raise InputError(
            f"{name} must be positive and finite in every axis; got {tuple(values)}",
            "give the voxel size in µm, e.g. 10 or 12,10,10",
        )
    return (values[0], values[1], values[2])


def voxel_volume_um3(spacing_um) -> float:
    """Volume of one voxel in µm³."""
    dz, dy, dx = as_spacing_um(spacing_um)
    return dz * dy * dx
