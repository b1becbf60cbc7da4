"""Public accessor methods built from the declarations in :mod:`logstats.methods` (label handling only).

Each container family (pandas, xarray, dask DataFrame) has its own leading keywords (``by``/``columns``
for tables, ``dim``/``by`` for arrays) and its own trailing ones (``observed``/``dropna``/``sort``,
``keep_attrs``, ``split_every``). :func:`install` gives a family's base class one method per declared
statistic, with a real signature (``inspect.signature`` and ``help()`` show it) and a numpydoc
docstring assembled from shared templates; the method binds its arguments and hands them to the
family's ``_statistic(name, arguments)``. So a new declaration reaches every container at once.
"""

from __future__ import annotations

import inspect
import numbers
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from logstats.methods import METHODS, Method

__all__ = ["FAMILIES", "Family", "docstring", "install", "signature"]

_P = inspect.Parameter


@dataclass(frozen=True)
class Family:
    name: str
    leading: tuple[tuple[str, Any, str], ...]  # (name, default, doc); the first is positional
    trailing: tuple[tuple[str, Any, str], ...]
    returns: str
    returns_single: str


_POLICY = (
    ("skipna", True, "Skip missing values and count them in ``n_missing``; False makes a group with any "
                     "missing value undefined (NaN)."),
    ("nonpositive", "raise", "Zeros, negatives and ``-inf``: ``\"raise\"`` refuses them (naming column, "
                             "groups and count), ``\"drop\"`` excludes and counts them in ``n_nonpositive``, "
                             "``\"nan\"`` makes the group's result NaN. ``+inf`` is always refused."),
)

FAMILIES: dict[str, Family] = {
    "pandas": Family(
        "pandas",
        leading=(("by", None, "Group keys as in ``DataFrame.groupby``: a column label, a list of labels, "
                              "or an aligned Series."),
                 ("columns", None, "Value column(s); default: numeric, non-boolean columns not used as keys "
                                   "or limits (integer columns named like identifiers are left out).")),
        trailing=_POLICY + (("observed", True, "As in ``groupby``: only key combinations that occur."),
                            ("dropna", True, "As in ``groupby``: rows with a missing key are left out, "
                                             "said in a LogstatsWarning and counted in the result's "
                                             "``attrs[\"n_without_key\"]``."),
                            ("sort", True, "As in ``groupby``: groups in sorted key order.")),
        returns="DataFrame with one row per group (group keys as the index; a ``variable`` level is added "
                "last when several value columns are summarised); a Series accessor without ``by`` gives "
                "a Series of the fields.",
        returns_single="float (Series without ``by``), Series (DataFrame without ``by``, or Series with "
                       "``by``), or DataFrame (groups x columns).",
    ),
    "xarray": Family(
        "xarray",
        leading=(("dim", None, "Dimension name or list to reduce; None reduces every dim (with ``by``: the "
                               "dim of that coordinate)."),
                 ("by", None, "Name of a 1-D coordinate along ``dim`` whose values are the groups.")),
        trailing=_POLICY + (("keep_attrs", True, "Carry ``attrs`` (units) to the fields in data units."),),
        returns="Dataset with one variable per field over the kept dims (plus the ``by`` dim); a Dataset "
                "with several numeric variables gains a ``variable`` dim. Lazy for dask-backed data where "
                "the method merges log-moments.",
        returns_single="DataArray (DataArray input) or Dataset of the field per variable.",
    ),
    "dask": Family(
        "dask",
        leading=(("by", None, "Column label or list of labels (dask Series for a dask Series)."),
                 ("columns", None, "Value column(s); default as for pandas.")),
        trailing=_POLICY + (("observed", True, "As in ``groupby``."), ("dropna", True, "As in ``groupby``."),
                            ("sort", True, "As in ``groupby``."),
                            ("split_every", None, "Partial moment tables merged per task.")),
        returns="A lazy one-partition dask DataFrame (``.compute()`` gives the pandas result); a single "
                "number is a ``dask.delayed.Delayed``.",
        returns_single="As for pandas, lazily.",
    ),
}


def signature(md: Method, family: Family) -> inspect.Signature:
    params = [_P("self", _P.POSITIONAL_OR_KEYWORD)]
    first, *rest = family.leading
    params.append(_P(first[0], _P.POSITIONAL_OR_KEYWORD, default=first[1]))
    params += [_P(n, _P.KEYWORD_ONLY, default=d) for n, d, _ in rest]
    params += [_P(p.name, _P.KEYWORD_ONLY, default=p.default, annotation=p.annotation) for p in md.params]
    params += [_P(n, _P.KEYWORD_ONLY, default=d) for n, d, _ in family.trailing]
    return inspect.Signature(params)


def _fields_doc(md: Method) -> str:
    names = ", ".join(f"``{f.name}``" for f in md.fields)
    extra = ""
    if md.censored_fields:
        extra = (" With ``detection_limit``: also "
                 + ", ".join(f"``{f.name}``" for f in md.censored_fields) + ".")
    units = sorted(md.unit_fields)
    unit_note = ""
    if units:
        unit_note = " Fields in the data's units: " + ", ".join(f"``{u}``" for u in units) + "."
    return f"Fields: {names}.{extra}{unit_note}"


def docstring(md: Method, family: Family) -> str:
    lines = [md.summary, ""]
    if md.notes:
        lines += [md.notes, ""]
    lines += ["Parameters", "----------"]
    for n, _d, doc in family.leading:
        lines += [f"{n}", f"    {doc}"]
    for p in md.params:
        first = " May also be given first, by position (a number first is read as it)." \
            if p.name in md.positional else ""
        lines += [f"{p.name} : {p.annotation}, default {p.default!r}", f"    {p.doc}{first}"]
    for n, _d, doc in family.trailing:
        lines += [f"{n}", f"    {doc}"]
    lines += ["", "Returns", "-------"]
    lines += [family.returns_single if md.shape == "single" else family.returns]
    if md.fields:
        lines += ["    " + _fields_doc(md)]
    if md.dask == "loads":
        lines += ["", "Notes", "-----", "Needs every value of a group together: dask-backed data are loaded."]
    if md.reference:
        lines += ["", "References", "----------", f"Checked against: {md.reference}."]
    if md.example and family.name == "pandas":
        lines += ["", "Examples", "--------", md.example]
    return "\n".join(lines)


def _is_quantity(value: Any) -> bool:
    """A number or an array of numbers (not a label): what a positional ``limit`` looks like."""
    if isinstance(value, (bool, np.bool_, str)):
        return False
    if isinstance(value, numbers.Real):
        return True
    return hasattr(value, "dtype") and getattr(value, "ndim", 0) >= 1


def _make(md: Method, family: Family) -> Callable[..., Any]:
    sig = signature(md, family)
    name = md.name

    def method(self: Any, *args: Any, **kwargs: Any) -> Any:
        if md.positional and args and _is_quantity(args[0]) and md.positional[0] not in kwargs:
            # exceedance(10.0, by="g"): a number first is the limit; a label first is by= / dim=
            kwargs[md.positional[0]] = args[0]
            args = args[1:]
        try:
            bound = sig.bind(self, *args, **kwargs)
        except TypeError as exc:
            raise TypeError(f"{name}(): {exc}") from None
        bound.apply_defaults()
        arguments = dict(bound.arguments)
        arguments.pop("self")
        check_types(md, arguments)
        return self._statistic(name, arguments)

    method.__name__ = method.__qualname__ = name
    method.__doc__ = docstring(md, family)
    method.__signature__ = sig  # type: ignore[attr-defined]
    return method


def check_types(md: Method, arguments: dict[str, Any]) -> None:
    """Refuse an option of the wrong type with a TypeError naming it (``ddof="1"``, ``skipna=1``)."""
    for p in md.params:
        v = arguments.get(p.name)
        if p.annotation in ("float", "int") and p.default is not None:
            ok = isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_))
            if p.annotation == "int":
                ok = ok and isinstance(v, numbers.Integral)
            if not ok:
                raise TypeError(f"{md.name}(): {p.name}= must be a number; got {v!r} "
                                f"({type(v).__name__})")
        elif p.annotation == "bool" and not isinstance(v, (bool, np.bool_)):
            raise TypeError(f"{md.name}(): {p.name}= must be True or False; got {v!r}")
    for key in ("skipna", "observed", "dropna", "sort", "keep_attrs"):
        if key in arguments and not isinstance(arguments[key], (bool, np.bool_)):
            raise TypeError(f"{md.name}(): {key}= must be True or False; got {arguments[key]!r}")


def install(cls: type, family: str, *, skip: tuple[str, ...] = ()) -> type:
    """Give ``cls`` one method per declared statistic (those it does not define itself)."""
    fam = FAMILIES[family]
    for md in METHODS.values():
        if md.reduction in ("compare", "transform") or md.name in skip or md.name in cls.__dict__:
            continue
        setattr(cls, md.name, _make(md, fam))
    return cls
