"""The Panel: units x periods values aligned to polygons, plus everything found on the way.

``load_panel(spec)`` reads a polygon layer and a values table, aligns them by unit ID and period
and returns an immutable :class:`Panel`. Every problem a real file has becomes a
:class:`~mapdrift.findings.Finding`; error-level findings raise :class:`~mapdrift.errors.InputError`.
Every input unit is accounted for: layer units without values are kept as no data; table rows
that match no polygon are listed in a finding.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from mapdrift.findings import Finding

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd

    from mapdrift.periods import Spacing

__all__ = ["InputSpec", "Panel", "PanelMeta", "load_panel", "period_label", "with_geometry"]


def period_label(period: Any) -> str:
    """Text for a period: ``2019`` -> ``'2019'``, ``Period('2020Q1')`` -> ``'2020Q1'``."""
    return str(period)


def _crs_text(crs: Any) -> str:
    """``EPSG:3857``, else the projection's method (``Lambert Azimuthal Equal Area``)."""
    if crs is None:
        return "no CRS"
    epsg = crs.to_epsg()
    if epsg:
        return f"EPSG:{epsg}"
    op = crs.coordinate_operation
    return op.method_name if op is not None else crs.name


@dataclass(frozen=True)
class PanelMeta:
    """What the values are: variable name, unit label and source line for titles and captions.

    ``view`` is one line naming how the values were rescaled after loading ('' = as read; see
    :mod:`mapdrift.views`); every output carries it.
    """

    variable: str = "value"
    unit_label: str = ""
    source: str = ""
    view: str = ""


@dataclass(frozen=True, eq=False)
class Panel:
    """Values of one variable for ``units`` (the geometry's order) over sorted ``periods``.

    ``values`` is a read-only float64 array ``[n_units, n_periods]``; NaN means missing.
    ``geometry`` is a GeoSeries aligned to ``units`` in the map CRS (projected, metres when the
    input was geographic). ``numerator``/``denominator`` hold the counts when the values are rates
    computed from counts (same shape; used by rate smoothing), else ``None``.
    ``inputs`` lists the files read (the manifest hashes them). ``labels`` are the periods as
    written when they differ from ``str(period)`` (multi-year periods such as ``1979-1984`` are
    placed at their end year, ``1984``); empty means ``str(period)``.
    """

    units: tuple[str, ...]
    periods: tuple[Any, ...]
    values: np.ndarray
    geometry: gpd.GeoSeries
    names: tuple[str, ...] = ()
    findings: tuple[Finding, ...] = ()
    meta: PanelMeta = field(default_factory=PanelMeta)
    numerator: np.ndarray | None = None
    denominator: np.ndarray | None = None
    inputs: tuple[Path, ...] = ()
    labels: tuple[str, ...] = ()
    moe: np.ndarray | None = None  # 90 % margins of error of the values (``--moe``), if given

    def __post_init__(self) -> None:
        values = np.array(self.values, dtype=np.float64)  # copy: the caller's array stays theirs
        if values.shape != (len(self.units), len(self.periods)):
            raise ValueError(
                f"values shape {values.shape} does not match {len(self.units)} units x "
                f"{len(self.periods)} periods"
            )
        values.flags.writeable = False
        object.__setattr__(self, "values", values)
        for name in ("numerator", "denominator", "moe"):
            arr = getattr(self, name)
            if arr is not None:
                arr = np.array(arr, dtype=np.float64)
                arr.flags.writeable = False
                object.__setattr__(self, name, arr)
        if not self.names:
            object.__setattr__(self, "names", tuple(self.units))
        if len(self.names) != len(self.units):
            raise ValueError("names must have one entry per unit")
        self._clean_texts()
        if len(self.geometry) != len(self.units):
            raise ValueError("geometry must have one entry per unit")
        if self.labels and len(self.labels) != len(self.periods):
            raise ValueError("labels must have one entry per period")

    def _clean_texts(self) -> None:
        """Control characters in IDs, names and labels become spaces (they would break slides
        and inject Markdown headings), said in ``ids-control-characters`` /
        ``names-control-characters`` findings (IDs that would then collide are an error)."""
        from mapdrift.findings import examples, plural
        from mapdrift.safetext import clean, clean_all

        units, odd = clean_all(self.units)
        if odd:
            if len(set(units)) != len(units):
                from mapdrift.errors import InputError

                raise InputError(
                    f"{plural(len(odd), 'unit ID')} hold line breaks, tabs or other control "
                    f"characters (e.g. {examples([repr(self.units[i]) for i in odd], 3)}) and "
                    "would collide with other IDs once those are replaced by spaces; fix the IDs"
                )
            shown = examples([repr(self.units[i]) for i in odd], 3, total=False)
            object.__setattr__(self, "units", units)
            object.__setattr__(
                self,
                "findings",
                (
                    *self.findings,
                    Finding(
                        "warning",
                        "ids-control-characters",
                        f"{plural(len(odd), 'unit ID')} held line breaks, tabs or other control "
                        f"characters ({shown}); they are written with spaces instead",
                        tuple(units[i] for i in odd),
                    ),
                ),
            )
        names, changed = clean_all(self.names)
        if changed:
            object.__setattr__(self, "names", names)
            if not any(f.code == "names-control-characters" for f in self.findings):
                units = [self.units[i] for i in changed]
                msg = (
                    f"{plural(len(changed), 'unit name')} held line breaks, tabs or other control "
                    f"characters (e.g. units {examples(units, 3, total=False)}); shown with "
                    "spaces instead in every map, table and report"
                )
                object.__setattr__(
                    self,
                    "findings",
                    (
                        *self.findings,
                        Finding("warning", "names-control-characters", msg, tuple(units)),
                    ),
                )
        m = self.meta
        meta = replace(
            m, variable=clean(m.variable), unit_label=clean(m.unit_label), source=clean(m.source)
        )
        if meta != m:
            object.__setattr__(self, "meta", meta)

    # -- shape -----------------------------------------------------------------------------
    @property
    def n_units(self) -> int:
        return len(self.units)

    @property
    def n_periods(self) -> int:
        return len(self.periods)

    @property
    def period_labels(self) -> tuple[str, ...]:
        """The periods as written, for display (``'2019'``, ``'2020Q1'``, ``'1979-1984'``)."""
        return self.labels or tuple(period_label(p) for p in self.periods)

    @property
    def period_span(self) -> str:
        """First to last period for texts: ``'2012-2024'``, or ``'1979-1984 to 1988-1993'``
        when the labels are ranges themselves."""
        labels = self.period_labels
        if not labels:
            return ""
        a, b = labels[0], labels[-1]
        if a == b:
            return a
        return f"{a} to {b}" if "-" in a + b else f"{a}-{b}"

    @property
    def spacing(self) -> Spacing:
        """The series' step and gaps on the one rule of :func:`mapdrift.periods.spacing`
        (decadal data step by 10 years; unevenly spaced periods step by one period)."""
        from mapdrift.periods import spacing

        return spacing(self.periods)

    @property
    def step_label(self) -> str:
        """Words for one step between consecutive periods, for sentences such as
        ``f"jumped 2+ classes in {panel.step_label}"``: ``'one year'``, ``'one quarter'``,
        ``'one step (10 years)'`` or ``'one step'``."""
        return self.spacing.step_label

    def period_index(self, period: Any) -> int:
        """Column of ``period`` (the period itself, its text ``'2019'`` or its label ``'1979-1984'``)."""
        labels = self.period_labels
        key = period_label(period)
        plain = tuple(period_label(p) for p in self.periods)
        if key not in labels and key in plain:
            return plain.index(key)
        if key not in labels:
            from mapdrift.errors import ConfigError
            from mapdrift.findings import examples

            raise ConfigError(
                f"period {key!r} is not in the data; periods are {examples(labels, 8)}"
            )
        return labels.index(key)

    # -- derived panels --------------------------------------------------------------------
    def with_values(
        self, values: np.ndarray, *, finding: Finding | None = None, **meta: str
    ) -> Panel:
        """A new Panel with other values (smoothed, relative...), optionally noting why."""
        findings = self.findings + ((finding,) if finding else ())
        new_meta = replace(self.meta, **meta) if meta else self.meta
        return replace(self, values=values, findings=findings, meta=new_meta)

    def with_findings(self, extra: Sequence[Finding]) -> Panel:
        return replace(self, findings=self.findings + tuple(extra))

    # -- summaries ---------------------------------------------------------------------------
    def __repr__(self) -> str:
        """A few lines: size, periods, variable, missing share, findings (never the arrays)."""
        per = self.period_labels
        span = f"{per[0]} to {per[-1]}" if per else "no periods"
        what = self.meta.variable + (f" ({self.meta.unit_label})" if self.meta.unit_label else "")
        missing = float(np.isnan(self.values).mean()) if self.values.size else 0.0
        levels = [f.level for f in self.findings]
        found = ", ".join(
            f"{levels.count(lvl)} {lvl}{'s' if levels.count(lvl) != 1 else ''}"
            for lvl in ("error", "warning", "note")
            if lvl in levels
        )
        crs = _crs_text(self.geometry.crs)
        return (
            f"<Panel: {self.n_units:,} units x {self.n_periods} periods ({span})\n"
            f"  {what}; {missing:.1%} of cells missing\n"
            f"  findings: {found or 'none'}; geometry in {crs}>"
        )

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """One row per unit: ``unit``, ``name``, one value column per period label, geometry."""
        import pandas as pd

        df = pd.DataFrame({"unit": list(self.units), "name": list(self.names)})
        values = pd.DataFrame(self.values, columns=list(self.period_labels))
        return with_geometry(pd.concat([df, values], axis=1), self)

    def completeness(self) -> pd.DataFrame:
        """Per period: units with a value, missing, and share present."""
        import pandas as pd

        present = (~np.isnan(self.values)).sum(axis=0)
        return pd.DataFrame(
            {
                "period": list(self.period_labels),
                "with_value": present,
                "missing": self.n_units - present,
                "share_present": present / max(self.n_units, 1),
            }
        )

    def to_frame(self) -> pd.DataFrame:
        """Long table: unit, name, period, value (NaN kept)."""
        import pandas as pd

        n_u, n_p = self.values.shape
        return pd.DataFrame(
            {
                "unit": np.repeat(np.array(self.units, dtype=object), n_p),
                "name": np.repeat(np.array(self.names, dtype=object), n_p),
                "period": list(self.period_labels) * n_u,
                "value": self.values.ravel(),
            }
        )

    @classmethod
    def from_arrays(
        cls,
        values: np.ndarray,
        geometry: Any,
        *,
        units: Sequence[str] | None = None,
        periods: Sequence[Any] | None = None,
        crs: Any = None,
        **kwargs: Any,
    ) -> Panel:
        """Build a Panel from arrays and shapes (for notebooks and tests); no validation."""
        import geopandas as gpd

        values = np.asarray(values, dtype=np.float64)
        n_u, n_p = values.shape
        units = tuple(str(u) for u in (units if units is not None else range(n_u)))
        periods = tuple(periods if periods is not None else range(n_p))
        if not isinstance(geometry, gpd.GeoSeries):
            geometry = gpd.GeoSeries(list(geometry), crs=crs)
        geometry = geometry.reset_index(drop=True)
        return cls(units=units, periods=periods, values=values, geometry=geometry, **kwargs)

    @classmethod
    def from_frames(
        cls,
        geodataframe: gpd.GeoDataFrame,
        dataframe: pd.DataFrame | None = None,
        *,
        id: str | None = None,
        period: str | None = None,
        value: str | None = None,
        columns: str | None = None,
        numerator: str | None = None,
        denominator: str | None = None,
        **options: Any,
    ) -> Panel:
        """A Panel from a GeoDataFrame of polygons and a DataFrame of values, for notebooks.

        The frames enter the same loading chain as files (at the long-frame stage), so IDs,
        periods and numbers are checked the same way and the same findings are attached.
        ``dataframe`` is long (``period`` and ``value``, or ``numerator``/``denominator``) or wide
        (``columns`` pattern such as ``'rate_*'`` or ``'PO(\\d+)'``); without it the values are
        columns of the GeoDataFrame. ``options`` are the other :class:`InputSpec` fields
        (``table_id``, ``name``, ``per``, ``min_base``, ``duplicates``, ``missing``, ``crs``,
        ``map_crs``, ``id_width``, ``decimal``, ``variable``, ``unit_label``, ``source``).

        Examples
        --------
        >>> import geopandas as gpd, pandas as pd
        >>> from shapely.geometry import box
        >>> gdf = gpd.GeoDataFrame({"tract": ["01", "02"]},
        ...                        geometry=[box(0, 0, 1000, 1000), box(1000, 0, 2000, 1000)],
        ...                        crs="EPSG:32616")
        >>> df = pd.DataFrame({"tract": ["1", "02", "01", "02"], "year": [2019, 2019, 2020, 2020],
        ...                    "rate": ["5.5", "(D)", "6.0", "7.25"]})
        >>> panel = Panel.from_frames(gdf, df, id="tract", period="year", value="rate")
        >>> panel.periods, panel.values.tolist()
        ((2019, 2020), [[5.5, 6.0], [nan, 7.25]])
        >>> sorted(f.code for f in panel.findings)
        ['ids-zero-padded', 'values-missing', 'values-not-numeric']
        """
        from mapdrift._loader import load_frames

        spec = InputSpec(
            geometry=Path("GeoDataFrame"),
            table=None,
            id=id,
            period=period,
            value=value,
            columns=columns,
            numerator=numerator,
            denominator=denominator,
            **options,
        )
        return load_frames(geodataframe, dataframe, spec)


def with_geometry(table: pd.DataFrame, where: Panel | gpd.GeoSeries) -> gpd.GeoDataFrame:
    """``table`` (one row per unit, a ``unit`` column) joined to the polygons of ``where``.

    Rows are matched by unit ID when ``where`` is a Panel (the table may be in any order;
    units it lacks get empty rows), else by position. Used by every ``to_geodataframe()``.
    """
    import geopandas as gpd

    if isinstance(where, Panel):
        geometry = where.geometry.reset_index(drop=True)
        if "unit" in table.columns and list(table["unit"]) != list(where.units):
            table = table.set_index("unit").reindex(list(where.units)).reset_index()
    else:
        geometry = where.reset_index(drop=True)
    if len(table) != len(geometry):
        raise ValueError(f"{len(table)} rows but {len(geometry)} polygons")
    return gpd.GeoDataFrame(table.reset_index(drop=True), geometry=geometry, crs=geometry.crs)


@dataclass(frozen=True)
class InputSpec:
    """Where the data are and how to read them; mirrors the command-line input options.

    Long tables name ``period`` and ``value`` columns; wide tables give ``columns`` as a glob
    pattern such as ``rate_*`` (the period is parsed from the rest of the name); with neither,
    columns whose names carry a year are used. ``numerator``/``denominator`` turn counts into
    rates ``per`` so many (patterns such as ``filings_*`` for wide tables). ``crosswalk`` (a
    from, to, weight table) moves the values onto the layer's boundary vintage first. ``append``
    names more tables to add to ``table`` (e.g. next year's release): long tables need the same
    columns; wide tables may hold only the new periods' columns besides the ID. ``view``
    (``relative-median``, ``index:2015``, ``deflate:cpi.csv``...) rescales the values after
    loading; the loader ignores it, :func:`mapdrift.views.apply_view` applies it.
    ``columns`` may also be a regular expression with one capture group around the period
    (``PO(\\d+)``, so that ``POLY_ID`` is not caught). ``decimal`` (``","`` or ``"."``) settles the
    decimal mark when a file's cells read either way (``1,234``). ``encoding`` names the text
    encoding of CSV tables that are not UTF-8 (e.g. ``"cp1252"``); it is never guessed.
    """

    geometry: Path
    table: Path | None = None
    layer: str | None = None
    id: str | None = None
    table_id: str | None = None
    name: str | None = None
    period: str | None = None
    value: str | None = None
    columns: str | None = None
    numerator: str | None = None
    denominator: str | None = None
    moe: str | None = None
    per: float = 1000.0
    min_base: float = 20.0
    duplicates: str = "error"
    missing: tuple[float, ...] = ()
    crs: str | None = None
    map_crs: str | None = None
    id_width: int | None = None
    variable: str | None = None
    unit_label: str | None = None
    source: str | None = None
    crosswalk: Path | None = None
    append: tuple[Path, ...] = ()
    view: str | None = None
    decimal: str | None = None
    encoding: str | None = None

    def __post_init__(self) -> None:
        import codecs

        from mapdrift.errors import ConfigError

        if self.encoding is not None:
            try:
                codecs.lookup(self.encoding)
            except LookupError:
                raise ConfigError(
                    f"encoding = {self.encoding!r} is not a text encoding Python knows; use e.g. "
                    "cp1252 (Excel on Windows), latin-1 or utf-8"
                ) from None

        if not self.per > 0:
            raise ConfigError(
                f"per = {self.per:g}: rates are per so many of the base and need a positive "
                "number, e.g. --per 1000 ([inputs] per = 1000)"
            )
        if self.min_base < 0:
            raise ConfigError(f"min_base = {self.min_base:g} must not be negative")
        if self.decimal is not None and self.decimal not in (",", "."):
            raise ConfigError(
                f"decimal = {self.decimal!r} must be ',' (decimal comma) or '.' (decimal point)"
            )
        object.__setattr__(self, "append", tuple(Path(p) for p in self.append))
        object.__setattr__(self, "geometry", Path(self.geometry))
        for name in ("table", "crosswalk"):
            if getattr(self, name) is not None:
                object.__setattr__(self, name, Path(getattr(self, name)))
        object.__setattr__(self, "missing", tuple(float(x) for x in self.missing))
        if self.view is not None:  # a bad view stops when the config is read
            from mapdrift.views import parse_view

            parse_view(self.view)


def load_panel(spec: InputSpec) -> Panel:
    """Read, align and validate; raise InputError on error-level findings."""
    from mapdrift._loader import load

    return load(spec)
