"""Elemental abundance tables and gas-phase fractions.

Tables live in ``cross_sections/abundances.txt`` (hand-transcribed, one
value per line with its source and whether it was checked against the
publication or is from memory).  Available tables (names are ours):

=============  ==============================================================
``angr89``     Anders & Grevesse 1989, GCA 53, 197, Table 2 (photosphere)
``wilms00``    Wilms, Allen & McCray 2000, ApJ 542, 914, Table 2 (ISM total)
``lodders03``  Lodders 2003, ApJ 591, 1220, Table 2 (proto-solar)
``asplund09``  Asplund et al. 2009, ARA&A 47, 481, Table 1 (photosphere)
=============  ==============================================================

Gas-phase fractions (1 - depletion): ``wilms00_gas`` (Wilms et al. 2000,
Table 2).  Elements a gas table does not list are fully in the gas phase.

Abundances are returned as number ratios n_el/n_H, A = 10**(logA - 12).
"""
from __future__ import annotations

import functools
from types import MappingProxyType

from .._paths import data_file
from ..errors import PhysicsDataError
from .atomic import element_symbol

__all__ = ["abundance_tables", "depletion_tables", "abundances", "abundance",
           "gas_fractions", "gas_fraction", "status", "DEFAULT_TABLE"]

DEFAULT_TABLE = "wilms00"


@functools.lru_cache(maxsize=1)
def _load():
    path = data_file("abundances.txt")
    values: dict[str, dict[str, float]] = {}
    flags: dict[str, dict[str, str]] = {}
    with open(path, encoding="ascii") as fh:
        for n, line in enumerate(fh, 1):
            if line.startswith("#") or not line.strip():
                continue
            parts = line.split()
            if len(parts) != 5:
                raise PhysicsDataError(f"{path}, line {n}: expected 5 columns "
                                       "(table, Z, element, value, status)")
            table, _, sym, value, stat = parts
            values.setdefault(table, {})[element_symbol(sym)] = float(value)
            flags.setdefault(table, {})[sym] = stat
    return values, flags, str(path)


def abundance_tables() -> tuple[str, ...]:
    """Names of the abundance tables."""
    return tuple(k for k in _load()[0] if not k.endswith("_gas"))


def depletion_tables() -> tuple[str, ...]:
    """Names of the gas-phase-fraction tables."""
    return tuple(k for k in _load()[0] if k.endswith("_gas"))


def _table(name: str, gas: bool):
    values, _, path = _load()
    known = depletion_tables() if gas else abundance_tables()
    if name not in known:
        kind = "gas-fraction" if gas else "abundance"
        raise PhysicsDataError(f"unknown {kind} table {name!r}; {path} has "
                               f"{', '.join(known)}")
    return values[name]


@functools.lru_cache(maxsize=None)
def _abund(name: str):
    return MappingProxyType({s: 10.0 ** (v - 12.0) for s, v in _table(name, False).items()})


def abundances(table: str = DEFAULT_TABLE):
    """Read-only mapping element symbol -> n_el/n_H for ``table``
    (only elements the source lists)."""
    return _abund(table)


def abundance(element, table: str = DEFAULT_TABLE) -> float:
    """n_el/n_H of ``element`` in ``table``; PhysicsDataError if not listed."""
    sym = element_symbol(element)
    tab = _abund(table)
    if sym not in tab:
        raise PhysicsDataError(f"abundance table {table!r} does not list {sym}")
    return tab[sym]


def gas_fractions(table: str = "wilms00_gas"):
    """Read-only mapping element -> fraction in the gas phase (listed elements)."""
    return MappingProxyType(dict(_table(table, True)))


def gas_fraction(element, table: str = "wilms00_gas") -> float:
    """Fraction of ``element`` in the gas phase (1 - depletion); 1 if the
    table does not list it."""
    return _table(table, True).get(element_symbol(element), 1.0)


def status(element, table: str) -> str:
    """How a value was obtained: ``"published"`` (checked against the
    publication), ``"definition"`` or ``"from_memory"`` (unconfirmed)."""
    sym = element_symbol(element)
    flags = _load()[1]
    if table not in flags or sym not in flags[table]:
        raise PhysicsDataError(f"table {table!r} has no entry for {sym}")
    return flags[table][sym]
