"""HDF5 dimension scales for the run file, laid out as netCDF-4 expects them.

A netCDF reader (h5netcdf, netCDF4, xarray on top of them) names the axes of a dataset after
the dimension scales attached to it, and finds a scale only in the dataset's own group or an
ancestor. The run file therefore keeps its coordinates at the root (``/x``, ``/y``, ``/t``, the
row index ``/vortex``), visible from every group; ``grid/x``, ``grid/y`` and ``snapshots/t``
are hard links to them (one dataset, two names), so the layout of format 1 still reads.

Before a dataset with attached scales is deleted it is detached, so that no scale keeps a
reference to a deleted object.

Units: whatever the coordinate carries (its ``units`` attribute).
"""

from __future__ import annotations

from collections.abc import Sequence

import h5py
import numpy as np

#: The attribute that carries a dataset's unit (CF convention). Files of format 1 used "unit".
UNITS_ATTR = "units"
LEGACY_UNITS_ATTR = "unit"


def units_of(obj: h5py.HLObject, default: str = "") -> str:
    """The unit of a dataset or group: its ``units`` attribute, or ``unit`` in older files.

    Units: none (returns the unit's name).
    """
    attrs = obj.attrs
    if UNITS_ATTR in attrs:
        return str(attrs[UNITS_ATTR])
    if LEGACY_UNITS_ATTR in attrs:
        return str(attrs[LEGACY_UNITS_ATTR])
    return default


def root_scale(f: h5py.File, name: str) -> h5py.Dataset | None:
    """The root coordinate ``name`` (x, y, t, vortex), or None in a file without scales.

    Units: the coordinate's own.
    """
    ds = f.get(name)
    return ds if isinstance(ds, h5py.Dataset) and ds.is_scale else None


def coordinate(group: h5py.Group, name: str, data, units: str, long_name: str,
               growing: bool = False) -> h5py.Dataset:
    """Create dataset ``name`` in ``group`` and make it the dimension scale ``name``.

    ``growing`` makes it extendable along its only axis (the time axis, the vortex rows).

    Units: ``units`` as given.
    """
    data = np.asarray(data)
    options = dict(maxshape=(None,), chunks=(256,)) if growing else {}
    ds = group.create_dataset(name, data=data, **options)
    ds.attrs[UNITS_ATTR] = units
    ds.attrs["long_name"] = long_name
    ds.make_scale(name)
    return ds


def attach(ds: h5py.Dataset, scales: Sequence[h5py.Dataset | None]) -> None:
    """Attach one scale per axis of ``ds``; a None (a file written before scales) skips all.

    Units: none.
    """
    if len(scales) != ds.ndim:
        raise ValueError(f"{ds.name}: {ds.ndim} axes, {len(scales)} scales given")
    if any(s is None for s in scales):
        return
    for axis, scale in enumerate(scales):
        if not h5py.h5ds.is_attached(ds.id, scale.id, axis):
            ds.dims[axis].attach_scale(scale)


def detach_all(obj: h5py.HLObject) -> None:
    """Detach every scale from ``obj`` (a dataset, or every dataset below a group).

    Units: none.
    """
    if isinstance(obj, h5py.Group):
        for child in obj.values():
            detach_all(child)
        return
    if not isinstance(obj, h5py.Dataset) or obj.is_scale:
        return
    for axis in range(obj.ndim):
        for scale in list(obj.dims[axis].values()):
            obj.dims[axis].detach_scale(scale)


def delete(group: h5py.Group, name: str) -> None:
    """``del group[name]`` after detaching its scales.

    Units: none.
    """
    detach_all(group[name])
    del group[name]


def array_scales(group: h5py.Group, name: str, shape: tuple[int, ...]) -> list[h5py.Dataset]:
    """Pixel-index scales ``<name>_row`` and ``<name>_column`` (``<name>_axis<k>`` beyond two
    axes) in ``group``, for an array that is not on the simulation grid (a mask image).

    Units: the scales count pixels ("1").
    """
    labels = ("row", "column") if len(shape) == 2 else [f"axis{k}" for k in range(len(shape))]
    return [coordinate(group, f"{name}_{label}", np.arange(n), "1", f"{label} of {name} (pixels)")
            for label, n in zip(labels, shape)]


def sync_index(f: h5py.File, table: str, index: str) -> None:
    """Make the row index ``index`` (0..rows-1) as long as dataset ``table`` and attached to it.

    Called after every change of the table; a file without the index (format 1) is left alone.

    Units: rows.
    """
    if index not in f or table not in f:
        return
    idx, ds = f[index], f[table]
    n = ds.shape[0]
    if idx.shape[0] != n:
        old = idx.shape[0]
        idx.resize(n, axis=0)
        if n > old:
            idx[old:] = np.arange(old, n)
    attach(ds, [idx])
