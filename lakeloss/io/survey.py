"""Looking at a user's own files to draft a configuration: what a layer and climate files hold.

Reads metadata only (layer fields and attribute values, NetCDF variable attributes and time
axes), never the climate values beyond what the reader probes. The drafting itself (which
variable is which quantity, which methods are possible, the TOML text) is in
:mod:`lakeloss.starter`.
"""

from __future__ import annotations

import glob
import os
import re
import tempfile
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pyogrio.errors
import xarray as xr

from lakeloss.errors import (
    ConfigError,
    GeometryError,
    InputDataError,
    LakelossError,
    LakelossWarning,
    OutputError,
)
from lakeloss.io import climate as climate_io
from lakeloss.io import zarr_store

NETCDF_SUFFIXES = (".nc", ".nc4", ".cdf", ".netcdf")
GEOTIFF_SUFFIXES = (".tif", ".tiff")
# Layer geometry types that may hold polygons or points; "Unknown" is what mixed GeoJSON and
# some drivers report, and the run's reader sorts those out feature by feature.
_MAYBE_MIXED = ("Unknown", "Geometry", "GeometryCollection")
_POINT_TYPES = ("Point", "MultiPoint")
_PARQUET_SUFFIXES = (".parquet", ".geoparquet")
# Dimensions of cell and time bounds, never data.
_BOUNDS_DIMS = frozenset({"bnds", "nv", "nb2", "bounds", "vertices", "nbnd"})
_READ_ERRORS = (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, OSError)


@dataclass(frozen=True)
class FieldSummary:
    """One attribute field of the layer: its name, kind and whether values are unique.

    ``kind`` is ``"integer"``, ``"text"``, ``"number"`` or ``"other"``; ``unique`` means no
    empty value and no repeat; ``distinct`` counts the distinct non-empty values.
    """

    name: str
    kind: str
    unique: bool
    distinct: int


@dataclass(frozen=True)
class LayerSummary:
    """What a water-body layer holds: layer name, feature count, CRS, fields, and how many
    of the features are points (a point register needs an area attribute)."""

    path: Path
    layer: str | None
    features: int
    crs: str | None
    fields: tuple[FieldSummary, ...]
    points: int = 0


@dataclass(frozen=True)
class VariableSummary:
    """One gridded variable of a NetCDF file, with the attributes that say what it is.

    ``height_m`` comes from a scalar ``height`` coordinate in metres (CMIP's ``sfcWind``
    carries 10 m); ``from_ecmwf`` is True when the variable or file carries ECMWF/GRIB
    attributes (ERA5 and its monthly means). ``paths`` lists every file of a variable split
    over several files (``path`` is the first of them); empty for a single file.
    """

    path: Path
    name: str
    standard_name: str | None
    units: str | None
    cell_methods: str
    long_name: str
    height_m: float | None
    from_ecmwf: bool
    paths: tuple[Path, ...] = ()

    @property
    def files(self) -> tuple[Path, ...]:
        """The file or files holding the variable."""
        return self.paths or (self.path,)


@dataclass(frozen=True)
class TimeSummary:
    """The time axis of one variable, or why lakeloss cannot use it (``problem``)."""

    step: str | None
    first: str | None
    last: str | None
    steps: int
    calendar: str | None
    description: str = ""
    problem: str | None = None


def climate_files(paths: list[Path]) -> list[Path]:
    """The climate files named, with folders expanded (recursively) to their NetCDF and
    GeoTIFF files and Zarr stores, in name order.

    Raises
    ------
    InputDataError
        A path does not exist, or nothing among the paths is a climate file.
    """
    found: list[Path] = []
    for path in paths:
        if not path.exists():
            raise InputDataError(
                f"climate path '{path}' does not exist; expected a NetCDF/GeoTIFF file or a "
                "folder of them; check the path"
            )
        if zarr_store.is_store(path):
            found.append(path)
        elif path.is_dir():
            found.extend(_files_in(path))
        elif _is_climate_file(path):
            found.append(path)
        else:
            raise InputDataError(
                f"climate file '{path}' is neither NetCDF ({', '.join(NETCDF_SUFFIXES)}) nor "
                f"GeoTIFF ({', '.join(GEOTIFF_SUFFIXES)}); expected one of those; convert it"
            )
    if not found:
        named = ", ".join(f"'{p}'" for p in paths)
        raise InputDataError(
            f"no climate files in {named}; expected NetCDF ({', '.join(NETCDF_SUFFIXES)}) or "
            f"GeoTIFF ({', '.join(GEOTIFF_SUFFIXES)}) files; name the files or their folder"
        )
    return list(dict.fromkeys(found))


def _files_in(folder: Path) -> list[Path]:
    """Climate files and Zarr stores under ``folder``; a store's own files are not listed."""
    found: list[Path] = []
    for root, dirs, names in os.walk(folder):
        stores = [d for d in dirs if zarr_store.is_store(Path(root, d))]
        found += [Path(root, d) for d in stores]
        dirs[:] = [d for d in dirs if d not in stores]
        found += [Path(root, n) for n in names if _is_climate_file(Path(root, n))]
    return sorted(found)


def _is_climate_file(path: Path) -> bool:
    return path.is_file() and path.suffix.lower() in NETCDF_SUFFIXES + GEOTIFF_SUFFIXES


def is_netcdf(path: Path) -> bool:
    """True for a NetCDF file or a Zarr store (both read as CF datasets)."""
    return path.suffix.lower() in NETCDF_SUFFIXES or is_zarr(path)


def is_zarr(path: Path) -> bool:
    return zarr_store.is_store(path)


# Dates in file and folder names: a year, optionally with month and day (2031, 203101,
# 2031-01, 20310101), standing alone (not part of a longer number).
_DATE_IN_NAME = re.compile(r"(?<![0-9])[0-9]{4}(?:[-_.]?[0-9]{2}){0,2}(?![0-9])")
_SEPARATORS = "_-./"


def series_key(path: Path) -> str:
    """A file's path with the dates in its name and folders blanked out: files of one series
    split by dates (``tas_day_..._20310101-20311231.nc``, ``era5/2031/t2m_01.nc``) share it."""
    return _DATE_IN_NAME.sub("#", path.absolute().as_posix())


def common_glob(files: list[Path], base: Path) -> str | None:
    """A glob pattern, relative to ``base``, that matches exactly ``files``; None if none is
    found (the files share no name pattern, or the pattern matches other files too).

    The pattern keeps what the relative paths share at the start and the end (cut back to a
    separator ``_ - . /``) and puts ``*`` between; ``*`` matches within one folder name.
    """
    if len(files) < 2:
        return None
    texts = [_relative_text(f, base) for f in files]
    head = os.path.commonprefix(texts)
    tail = os.path.commonprefix([t[::-1] for t in texts])[::-1]
    cut = max((head.rfind(c) for c in _SEPARATORS), default=-1)
    head = head[: cut + 1]
    starts = [i for i in (tail.find(c) for c in _SEPARATORS) if i >= 0]
    tail = tail[min(starts) :] if starts else ""
    if glob.has_magic(head + tail) or any(len(t) < len(head) + len(tail) for t in texts):
        return None
    pattern = f"{head}*{tail}"
    anchored = pattern if Path(pattern).is_absolute() else os.path.join(base, pattern)
    matched = {os.path.realpath(m) for m in glob.glob(anchored)}
    return pattern if matched == {os.path.realpath(f) for f in files} else None


def _relative_text(path: Path, base: Path) -> str:
    try:
        return Path(os.path.relpath(path.absolute(), base)).as_posix()
    except ValueError:  # another drive on Windows
        return path.absolute().as_posix()


# ----------------------------------------------------------------------------- layer


def survey_layer(path: Path, layer: str | None = None) -> LayerSummary:
    """Summarise a layer of polygons or points (or both): its name, feature count, CRS,
    attribute fields and number of points.

    Raises
    ------
    InputDataError
        Missing or unreadable file.
    ConfigError
        Several polygon or point layers and none chosen, or the chosen one is absent.
    GeometryError
        No polygon or point layer, or a layer with no features.
    """
    if not path.exists():
        raise InputDataError(
            f"water-body layer '{path}' does not exist; expected a vector file (GeoPackage, "
            "Shapefile, GeoJSON); check the path"
        )
    if path.suffix.lower() in _PARQUET_SUFFIXES:
        return _survey_parquet(path)
    chosen, kind = _water_body_layer(path, layer)
    try:
        info = pyogrio.read_info(os.fspath(path), layer=chosen)
        frame = pyogrio.read_dataframe(os.fspath(path), layer=chosen, read_geometry=False)
        points = _count_points(path, chosen, kind, int(info["features"]))
    except _READ_ERRORS as err:
        raise InputDataError(
            f"water-body layer '{path}' cannot be read ({' '.join(str(err).split())}); "
            "expected a readable vector file; re-export it"
        ) from err
    if int(info["features"]) == 0:
        raise GeometryError(
            f"water-body layer '{path}' (layer '{chosen}') has no features; expected polygons "
            "of water bodies; check the file"
        )
    return LayerSummary(
        path=path,
        layer=chosen,
        features=int(info["features"]),
        crs=info.get("crs"),
        fields=tuple(_field_summary(frame[name]) for name in frame.columns),
        points=points,
    )


def _count_points(path: Path, layer: str, kind: str, features: int) -> int:
    if _base_kind(kind) in _POINT_TYPES:
        return features
    if _base_kind(kind) not in _MAYBE_MIXED:
        return 0
    # A mixed layer: only its geometries tell (read without attributes).
    shapes = pyogrio.read_dataframe(os.fspath(path), layer=layer, columns=[])
    return int(shapes.geometry.geom_type.isin(_POINT_TYPES).sum())


def _survey_parquet(path: Path) -> LayerSummary:
    import geopandas

    try:
        frame = geopandas.read_parquet(path)
    except (OSError, ValueError, ImportError) as err:
        raise InputDataError(
            f"water-body layer '{path}' cannot be read as GeoParquet "
            f"({' '.join(str(err).split())}); expected a readable file; re-export it"
        ) from err
    kinds = frame.geometry.geom_type
    points = int(kinds.isin(_POINT_TYPES).sum())
    if not bool(kinds.isin(["Polygon", "MultiPolygon"]).any()) and not points:
        raise GeometryError(
            f"water-body layer '{path}' has no polygons or points ({len(frame)} features); "
            "expected polygons of water bodies, or points with their area; check the file"
        )
    attributes = frame.drop(columns=frame.geometry.name)
    return LayerSummary(
        path=path,
        layer=None,
        features=len(frame),
        crs=None if frame.crs is None else frame.crs.to_string(),
        fields=tuple(_field_summary(attributes[name]) for name in attributes.columns),
        points=points,
    )


def _base_kind(kind: str) -> str:
    """The geometry type without its dimensions: "Point Z" -> "Point"."""
    words = [w for w in kind.split() if w not in ("Z", "M", "ZM", "25D", "2.5D", "3D")]
    return " ".join(words)


def _is_water_body_kind(kind: str) -> bool:
    base = _base_kind(kind)
    return "Polygon" in base or base in _POINT_TYPES or base in _MAYBE_MIXED


def _water_body_layer(path: Path, layer: str | None) -> tuple[str, str]:
    try:
        table = pyogrio.list_layers(os.fspath(path))
    except _READ_ERRORS as err:
        raise InputDataError(
            f"water-body layer '{path}' cannot be read ({' '.join(str(err).split())}); "
            "expected a readable vector file; re-export it"
        ) from err
    kinds = {str(name): str(kind) for name, kind in table}
    if layer is not None:
        if layer not in kinds:
            raise ConfigError(
                f"layer '{layer}' is not in '{path}'; the layers are "
                f"{', '.join(kinds) or 'none'}; choose one with --layer"
            )
        if not _is_water_body_kind(kinds[layer]):
            raise GeometryError(
                f"layer '{layer}' of '{path}' holds {kinds[layer]} geometries; expected "
                "polygons of water bodies, or points with their area; choose another layer"
            )
        return layer, kinds[layer]
    usable = [name for name, kind in kinds.items() if _is_water_body_kind(kind)]
    if not usable:
        found = ", ".join(f"{n} ({k})" for n, k in kinds.items()) or "no layers"
        raise GeometryError(
            f"'{path}' has no polygon or point layer ({found}); expected polygons of water "
            "bodies, or points with their area; give such a layer"
        )
    if len(usable) > 1:
        raise ConfigError(
            f"'{path}' has {len(usable)} polygon or point layers ({', '.join(usable)}); "
            "choose one with --layer"
        )
    return usable[0], kinds[usable[0]]


def _field_summary(values: pd.Series) -> FieldSummary:
    present = values.dropna()
    if pd.api.types.is_bool_dtype(values):
        kind = "other"
    elif pd.api.types.is_integer_dtype(values):
        kind = "integer"
    elif pd.api.types.is_float_dtype(values):
        whole = present.size and np.all(np.mod(present.to_numpy(dtype=float), 1.0) == 0.0)
        kind = "integer" if whole else "number"
    elif pd.api.types.is_object_dtype(values) or pd.api.types.is_string_dtype(values):
        kind = "text" if all(isinstance(v, str) for v in present) else "other"
    else:
        kind = "other"
    if kind == "text":
        present = present[present.str.strip() != ""]
    distinct = int(present.nunique())
    unique = len(present) == len(values) and distinct == len(values)
    return FieldSummary(name=str(values.name), kind=kind, unique=unique, distinct=distinct)


# ----------------------------------------------------------------------------- climate


def survey_netcdf(path: Path) -> list[VariableSummary]:
    """The gridded variables of a NetCDF file (two or more dimensions, not bounds or CRS).

    Raises
    ------
    InputDataError
        The file cannot be opened as NetCDF.
    """
    try:
        if is_zarr(path):
            dataset = zarr_store.open_store(path)
        else:
            dataset = xr.open_dataset(path, engine="netcdf4", decode_times=False, cache=False)
    except (OSError, ValueError, RuntimeError, KeyError, IndexError, TypeError) as err:
        raise InputDataError(
            f"climate file '{path}' is unreadable or not NetCDF ({' '.join(str(err).split())}); "
            "expected a readable NetCDF file; re-download it or leave it out"
        ) from err
    with dataset:
        bounds = {str(v.attrs.get("bounds")) for v in dataset.variables.values()}
        ecmwf_file = "ecmwf" in " ".join(str(v) for v in dataset.attrs.values()).lower()
        return [
            _variable_summary(path, dataset, str(name), ecmwf_file)
            for name, data in dataset.data_vars.items()
            if data.ndim >= 2
            and str(name) not in bounds
            and not _BOUNDS_DIMS.intersection(str(d) for d in data.dims)
        ]


def _variable_summary(
    path: Path, dataset: xr.Dataset, name: str, ecmwf_file: bool
) -> VariableSummary:
    attrs = dataset[name].attrs
    return VariableSummary(
        path=path,
        name=name,
        standard_name=_text(attrs.get("standard_name")),
        units=_text(attrs.get("units")),
        cell_methods=str(attrs.get("cell_methods", "")),
        long_name=str(attrs.get("long_name", "")),
        height_m=_height(dataset, name),
        from_ecmwf=ecmwf_file or any(str(k).startswith("GRIB_") for k in attrs),
    )


def _text(value: object) -> str | None:
    return None if value is None else str(value)


def _height(dataset: xr.Dataset, name: str) -> float | None:
    for coord_name in ("height", "height_above_ground"):
        if coord_name in dataset.variables:
            coord = dataset[coord_name]
            if coord.size == 1 and str(coord.attrs.get("units", "m")) in ("m", "meter", "metre"):
                return float(np.asarray(coord.values).reshape(-1)[0])
    return None


def survey_time(variable: VariableSummary, quantity: str, units: str | None) -> TimeSummary:
    """The time axis of a variable as the run would read it, or the reason it cannot.

    Opens the variable with the run's own reader, so a unit, grid or time problem found
    here is the one ``lakeloss check`` would report.
    """
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", LakelossWarning)
            source = list(variable.paths) if len(variable.paths) > 1 else variable.path
            field = climate_io.open_netcdf(source, variable.name, quantity, units=units)
        axis = field.time_axis
        field.data.close()
    except LakelossError as err:
        return TimeSummary(None, None, None, 0, None, problem=str(err))
    return TimeSummary(
        axis.step, axis.starts[0], axis.ends[-1], len(axis), axis.calendar, axis.describe()
    )


def write_new_text(path: Path, text: str, *, overwrite: bool) -> None:
    """Write ``text`` to ``path`` whole or not at all; an existing file needs ``overwrite``.

    Raises
    ------
    OutputError
        The file exists and ``overwrite`` is False, or it cannot be written.
    """
    if path.exists() and not overwrite:
        raise OutputError(
            f"'{path}' already exists; expected a new file name; choose another name or "
            "add --overwrite to replace it"
        )
    if path.is_dir():
        raise OutputError(f"'{path}' is a directory; expected a file name for the configuration")
    try:
        descriptor, staging = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.")
    except OSError as err:
        raise OutputError(
            f"cannot write '{path}' ({err.strerror or err}); expected a writable folder; "
            "choose another place"
        ) from err
    try:
        with os.fdopen(descriptor, "w", encoding="utf-8") as handle:
            handle.write(text)
        os.chmod(staging, 0o666 & ~_umask())  # mkstemp's 0600 would hide it from others
        os.replace(staging, path)
    except OSError as err:
        Path(staging).unlink(missing_ok=True)
        raise OutputError(
            f"cannot write '{path}' ({err.strerror or err}); expected a writable folder; "
            "choose another place"
        ) from err


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask
