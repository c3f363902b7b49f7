"""From a stream's analysis to the solver's arrays.

``parse_stream`` checks one StreamSpec against the thermodynamic data and converts
every entry to mol/kg of water; ``assemble`` packs many parsed streams into one
``BalanceProblem`` with all constants evaluated at each stream's temperature.

Concentration scales: the solver works on the molal scale (the scale of the
thermodynamic constants and of the IUPAC pH standards). Amounts given per litre are
converted with the density of pure water at the stream's temperature,
m [mol/kg] = c [mol/L] / ρ_w [kg/L]: the dilute-solution approximation, good to well
under 1 % below about 0.1 mol/L of dissolved salts.
"""

from __future__ import annotations

import math
import operator
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from models import units, water
from models.activity import HARD_LIMIT_MOL_KG, model_code
from models.errors import InputError
from models.fractions import cumulative_pk
from models.solver import BalanceProblem
from models.stream import ACTIVITY_MODELS, BALANCE_IONS, CustomSystem, StreamSpec
from models.thermo import SystemData, ThermoDatabase

__all__ = ["ALKALINITY", "Assembled", "ParsedStream", "assemble", "parse_stream", "water_terms"]

ALKALINITY = "alkalinity"
CARBONATE = "carbonate"


@dataclass
class ParsedStream:
    """One stream's analysis on the molal scale, checked against the data."""

    temperature_c: float
    activity_model: str
    density_kg_l: float
    strong: dict[str, float]                 # strong ion -> mol/kg
    systems: list[SystemData]                # slot order
    totals: list[float]                      # mol/kg per slot (closed systems)
    open_slot: int | None                    # slot of carbonate open to gas
    co2_partial_pressure_atm: float | None
    alkalinity_eq_kg: float | None
    measured_ph: float | None
    balance_on: str | None
    warnings: list[str] = field(default_factory=list)


@lru_cache(maxsize=4096)
def _factor(
    unit: str, kind: str, formula: str, charge: int, atoms: tuple[tuple[str, int], ...], name: str
) -> float:
    """Unit factor to mol/L (or mol/kg), cached: a batch repeats the same few analytes."""
    return units.conversion_factor(
        unit, kind=kind, formula=formula, charge=charge, as_atoms=dict(atoms), name=name
    )


def _system_for(name: str, customs: dict[str, SystemData], db: ThermoDatabase) -> SystemData | None:
    return customs.get(name) or db.systems.get(name)


@lru_cache(maxsize=1024)
def _density(t: float) -> float:
    """Density of water [kg/L] at ``t`` [°C], cached: a batch repeats a few temperatures."""
    return float(water.density_kg_l(t))


#: Per database: (name, unit) -> (strong ion or None, system or None, factor, per kg),
#: for built-in names whose unit converted without error (errors are never cached).
_ENTRY_PLANS: dict[int, tuple[ThermoDatabase, dict]] = {}
#: Per database: temperature -> {built-in system: its extrapolation warnings} (usually empty).
_EXTRAPOLATED: dict[int, tuple[ThermoDatabase, dict]] = {}
_EXTRAPOLATED_MAX = 4096
#: Per database: a custom system's definition -> its SystemData (immutable, shared by
#: the streams that declare it identically; only successful builds are kept).
_CUSTOMS: dict[int, tuple[ThermoDatabase, dict]] = {}
_CUSTOMS_MAX = 1024


def _per_db(store: dict[int, tuple[ThermoDatabase, dict]], db: ThermoDatabase) -> dict:
    got = store.get(id(db))
    if got is None or got[0] is not db:
        if len(store) >= 8:  # a few databases at most stay referenced
            store.clear()
        got = store[id(db)] = (db, {})
    return got[1]


def _entry_plan(name: str, unit: str, customs: dict[str, SystemData], db: ThermoDatabase, where: str):
    """What an entry is and its unit factor; raise InputError naming the field at fault."""
    ion = db.strong_ions.get(name)
    system = _system_for(name, customs, db)
    try:
        if ion is not None:
            factor = _factor(unit, "strong_ion", ion.formula, ion.charge, (), name)
        elif system is not None:
            factor = _factor(
                unit, "system", system.mass_formula, 0, tuple(sorted(system.as_atoms.items())), name
            )
        elif name == ALKALINITY:
            factor = _factor(unit, "alkalinity", "CaCO3", 0, (), name)
        else:
            raise InputError(
                f"unknown species or system {name!r}: use a strong ion, a built-in system "
                "(see GET /v1/systems), 'alkalinity', or declare it in custom_systems",
                where + "/name",
            )
    except InputError as exc:
        raise InputError(exc.message, exc.field or where + "/unit") from None
    return ion, system, float(factor), units.is_per_kg(unit)


def _custom_key(cs: CustomSystem) -> tuple | None:
    """The exact definition of a custom system as a cache key, or None (not cacheable).

    Floats are keyed by their bits (float.hex: -0.0 and 0.0 stay apart), the charge only
    as a plain int (True == 1 must still be refused)."""
    if type(cs.name) is not str or type(cs.top_charge) is not int:
        return None
    try:
        pka = tuple(map(float.hex, cs.pka))
        dh = None if cs.delta_h_kj_mol is None else tuple(map(float.hex, cs.delta_h_kj_mol))
    except TypeError:  # not floats: built (and checked) afresh each time
        return None
    return (cs.name, cs.top_charge, pka, dh)


def _custom_system(cs: CustomSystem, db: ThermoDatabase) -> SystemData:
    """``db.custom_system`` for ``cs``, cached per database by the exact definition."""
    key = _custom_key(cs)
    if key is None:
        return db.custom_system(cs.name, cs.pka, cs.top_charge, cs.delta_h_kj_mol)
    cache = _per_db(_CUSTOMS, db)
    got = cache.get(key)
    if got is None:
        got = db.custom_system(cs.name, cs.pka, cs.top_charge, cs.delta_h_kj_mol)
        if len(cache) >= _CUSTOMS_MAX:  # bounded: every request may declare new ones
            cache.clear()
        cache[key] = got
    return got


def parse_stream(spec: StreamSpec, db: ThermoDatabase) -> ParsedStream:
    """Check and convert one stream; raise InputError naming the field at fault.

    Per-stream Python is kept to the checks themselves: unit factors, the name lookup
    of built-in entries, the water density and the extrapolation warnings are cached
    (per database, unit and temperature)."""
    t = float(spec.temperature_c)
    if not (math.isfinite(t) and 0.0 <= t <= 100.0):
        raise InputError("temperature must be between 0 and 100 °C", "/temperature_c")
    if spec.activity_model not in ACTIVITY_MODELS:
        raise InputError(
            f"unknown activity model {spec.activity_model!r}; use one of {', '.join(ACTIVITY_MODELS)}",
            "/activity_model",
        )
    rho = _density(t)
    customs: dict[str, SystemData] = {}
    for i, cs in enumerate(spec.custom_systems):
        if cs.name in db.systems or cs.name in db.strong_ions or cs.name == ALKALINITY:
            raise InputError(
                f"custom system name {cs.name!r} is already a built-in name", f"/custom_systems/{i}/name"
            )
        if cs.name in customs:
            raise InputError(f"custom system {cs.name!r} is declared twice", f"/custom_systems/{i}/name")
        try:
            customs[cs.name] = _custom_system(cs, db)
        except InputError as exc:
            raise InputError(exc.message, f"/custom_systems/{i}/pka") from None
    if not spec.composition:
        raise InputError("the composition is empty: give at least one ion or system", "/composition")
    plans = _per_db(_ENTRY_PLANS, db)
    strong: dict[str, float] = {}
    systems: list[SystemData] = []
    totals: list[float] = []
    alkalinity: float | None = None
    seen: set[str] = set()
    isfinite = math.isfinite
    for i, entry in enumerate(spec.composition):
        name = entry.name
        if name in seen:
            raise InputError(f"{name} appears twice in the composition", f"/composition/{i}/name")
        seen.add(name)
        value = float(entry.value)
        if not (isfinite(value) and value >= 0.0):
            raise InputError(f"{name}: the amount must be a finite number ≥ 0", f"/composition/{i}/value")
        key = (name, entry.unit)
        try:
            plan = plans.get(key) if not customs or name not in customs else None
        except TypeError:  # an unhashable unit: the checks below name the fault
            plan = key = None
        if plan is None:
            plan = _entry_plan(name, entry.unit, customs, db, f"/composition/{i}")
            if key is not None and name not in customs:
                plans[key] = plan
        ion, system, factor, per_kg = plan
        amount = value * factor  # a float: both are (see _entry_plan)
        molal = amount if per_kg else amount / rho
        if ion is not None:
            strong[name] = molal
        elif system is not None:
            if molal > HARD_LIMIT_MOL_KG:
                # Neutral species are ideal (γ = 1), true only in dilute solution, and escape
                # the ionic-strength limit: an undissociated total needs its own bound.
                raise InputError(
                    f"{name}: {molal:.3g} mol/kg of water is more than {HARD_LIMIT_MOL_KG:g} mol/kg, "
                    "beyond every activity model offered here; check the value and its unit",
                    f"/composition/{i}/value",
                )
            systems.append(system)
            totals.append(molal)
        else:
            alkalinity = molal
    for cname in customs:
        if cname not in seen:
            raise InputError(
                f"custom system {cname!r} is declared but has no amount in the composition",
                "/custom_systems",
            )
    return _finish(spec, db, t, rho, strong, systems, totals, alkalinity)


def _extrapolation_warning(s: SystemData, t: float) -> list[str]:
    return [
        f"{s.name}: pK{k + 1} is extrapolated beyond the temperature range of its fit"
        for k in s.extrapolated_steps(t)
    ]


def _extrapolating_builtins(db: ThermoDatabase, t: float) -> dict[str, list[str]]:
    """The built-in systems whose fit is extrapolated at ``t`` [°C], with their warnings
    (cached per database and temperature; usually empty)."""
    cache = _per_db(_EXTRAPOLATED, db)
    got = cache.get(t)
    if got is None:
        got = {}
        for s in db.systems.values():
            w = _extrapolation_warning(s, t)
            if w:
                got[s.name] = w
        if len(cache) >= _EXTRAPOLATED_MAX:  # bounded: a historian may bring many temperatures
            cache.clear()
        cache[t] = got
    return got


def _finish(
    spec: StreamSpec,
    db: ThermoDatabase,
    t: float,
    rho: float,
    strong: dict[str, float],
    systems: list[SystemData],
    totals: list[float],
    alkalinity: float | None,
) -> ParsedStream:
    warnings: list[str] = []
    pco2 = spec.co2_partial_pressure_atm
    names = [s.name for s in systems] if alkalinity is not None or pco2 is not None else []
    open_slot: int | None = None
    if spec.balance_on is not None and spec.balance_on not in BALANCE_IONS:
        raise InputError(f"balance_on must be one of {', '.join(BALANCE_IONS)}", "/balance_on")
    if spec.balance_on is not None and spec.measured_ph is None:
        raise InputError("balance_on needs measured_ph: the pH at which to close the balance", "/measured_ph")
    if alkalinity is not None:
        if spec.measured_ph is None:
            raise InputError("alkalinity needs measured_ph to fix the carbonate total", "/measured_ph")
        if CARBONATE in names:
            raise InputError("give either the carbonate total or alkalinity, not both", "/composition")
        if pco2 is not None:
            raise InputError("alkalinity with a gas phase over-determines carbonate: give one", "/gas")
        systems.append(db.systems[CARBONATE])
        totals.append(0.0)
    if pco2 is not None:
        if CARBONATE in names:
            open_slot = names.index(CARBONATE)
            warnings.append(
                "the carbonate total of the analysis is replaced by equilibrium with the gas phase"
            )
        else:
            systems.append(db.systems[CARBONATE])
            totals.append(0.0)
            open_slot = len(systems) - 1
    extrapolating = _extrapolating_builtins(db, t)
    if extrapolating or spec.custom_systems:
        for s in systems:
            if not s.builtin:
                warnings.extend(_extrapolation_warning(s, t))
            elif s.name in extrapolating:
                warnings.extend(extrapolating[s.name])
    return ParsedStream(
        temperature_c=t,
        activity_model=spec.activity_model,
        density_kg_l=rho,
        strong=strong,
        systems=systems,
        totals=totals,
        open_slot=open_slot,
        co2_partial_pressure_atm=pco2,
        alkalinity_eq_kg=alkalinity,
        measured_ph=spec.measured_ph,
        balance_on=spec.balance_on,
        warnings=warnings,
    )


@dataclass(frozen=True)
class Assembled:
    """A batch's BalanceProblem plus what the results need to name things."""

    problem: BalanceProblem
    temperature_c: NDArray[np.float64]
    density_kg_l: NDArray[np.float64]
    strong_names: tuple[str, ...]
    strong_molal: NDArray[np.float64]        # (N, n_strong)
    slots: list[list[SystemData]]            # per stream
    lambda0: NDArray[np.float64]             # (N, K, P) limiting conductivity, 0 if none


def assemble(parsed: list[ParsedStream], db: ThermoDatabase) -> Assembled:
    """Pack parsed streams into one vectorized problem (constants at each temperature).

    Streams are grouped by layout (their strong ions, their systems in slot order), so
    each group is filled with one array assignment; temperature-dependent constants are
    evaluated once per distinct temperature."""
    n = len(parsed)
    temp = np.array([p.temperature_c for p in parsed], dtype=float)
    rho = np.array([p.density_kg_l for p in parsed], dtype=float)
    t_unique, t_index = np.unique(temp, return_inverse=True)
    t_index = t_index.reshape(-1)
    t_key = t_unique.tobytes()
    strong_names = tuple(db.strong_ions)
    charges = np.array([db.strong_ions[s].charge for s in strong_names], dtype=float)
    strong_m = np.zeros((n, len(strong_names)))
    col = {s: j for j, s in enumerate(strong_names)}
    strong_groups: dict[tuple[str, ...], list[int]] = {}
    layouts: dict[tuple[int, ...], tuple[list[SystemData], list[int]]] = {}
    opened: list[int] = []
    for i, p in enumerate(parsed):
        sk = tuple(p.strong)
        rows = strong_groups.get(sk)
        if rows is None:
            strong_groups[sk] = [i]
        else:
            rows.append(i)
        if p.systems:
            lk = tuple(map(id, p.systems))
            got = layouts.get(lk)
            if got is None:
                layouts[lk] = (p.systems, [i])
            else:
                got[1].append(i)
        if p.open_slot is not None:
            opened.append(i)
    k_max = max([1] + [len(systems) for systems, _ in layouts.values()])
    p_max = 1 + max([1] + [s.n_steps for systems, _ in layouts.values() for s in systems])
    cum = np.full((n, k_max, p_max), np.inf)
    cum[..., 0] = 0.0
    charge = np.zeros((n, k_max, p_max))
    size = np.zeros((n, k_max, p_max))
    lam0 = np.zeros((n, k_max, p_max))
    total = np.zeros((n, k_max))
    is_open = np.zeros((n, k_max), dtype=bool)
    open_neutral = np.zeros((n, k_max))
    for i in opened:
        is_open[i, parsed[i].open_slot] = True
    for sk, rows in strong_groups.items():
        if sk:
            vals = np.array([list(parsed[i].strong.values()) for i in rows], dtype=float)
            strong_m[np.ix_(rows, [col[s] for s in sk])] = vals
    # Each layout's constant blocks (and its pK at the batch's temperatures), made once.
    for lk, (systems, rows) in layouts.items():
        ii = np.array(rows)
        kk = len(systems)
        total[ii, :kk] = np.array([parsed[i].totals for i in rows], dtype=float).reshape(len(rows), kk)
        blk = _layout_block(lk, systems, db)
        pw = blk.width
        charge[ii, :kk, :pw] = blk.charge
        size[ii, :kk, :pw] = blk.size
        lam0[ii, :kk, :pw] = blk.lambda0
        cum[ii, :kk, :pw] = blk.cum_pk_at(t_unique, t_key)[t_index[ii]]
    if is_open.any():
        rows, slots_ = np.nonzero(is_open)
        pco2 = np.array([parsed[i].co2_partial_pressure_atm for i in rows], dtype=float)
        open_neutral[rows, slots_] = 10.0 ** db.log_kh_co2(temp[rows]) * pco2
    water_u = _water_terms_at(t_unique, t_key, db)
    codes = {m: model_code(m) for m in {p.activity_model for p in parsed}}
    problem = BalanceProblem(
        strong_charge=strong_m @ charges,
        strong_ionic=strong_m @ (charges * charges),
        activity_code=np.array([codes[p.activity_model] for p in parsed], dtype=int),
        **{k: v[t_index] for k, v in water_u.items()},
        total=total,
        is_open=is_open,
        open_neutral=open_neutral,
        cum_pk=cum,
        charge=charge,
        ion_size=size,
    )
    return Assembled(problem, temp, rho, strong_names, strong_m, [p.systems for p in parsed], lam0)


@dataclass
class _LayoutBlock:
    """A slot layout's (K, P) blocks: charges, ion sizes, λ° (0 where none or padded),
    and its cumulative pK per set of distinct temperatures (+inf where padded)."""

    systems: tuple[SystemData, ...]
    width: int
    charge: NDArray
    size: NDArray
    lambda0: NDArray
    cum: dict[bytes, NDArray]

    def cum_pk_at(self, t_unique: NDArray, t_key: bytes) -> NDArray:
        got = self.cum.get(t_key)
        if got is None:
            got = np.full((t_unique.shape[0], len(self.systems), self.width), np.inf)
            for k, s in enumerate(self.systems):
                got[:, k, : s.n_steps + 1] = _cum_pk_at(s, t_unique, t_key)
            if t_unique.shape[0] <= _T_CACHE_MAX_TEMPS:
                got.setflags(write=False)
                if len(self.cum) >= 8:
                    self.cum.clear()
                self.cum[t_key] = got
        return got


#: (id(db), ids of a layout's systems) -> its _LayoutBlock (the objects kept guard ids).
_LAYOUTS: dict[tuple[int, tuple[int, ...]], tuple[ThermoDatabase, _LayoutBlock]] = {}
_LAYOUTS_MAX = 256


def _layout_block(lk: tuple[int, ...], systems: list[SystemData], db: ThermoDatabase) -> _LayoutBlock:
    key = (id(db), lk)
    got = _LAYOUTS.get(key)
    if got is not None and got[0] is db and all(map(operator.is_, got[1].systems, systems)):
        return got[1]
    kk = len(systems)
    width = 1 + max(s.n_steps for s in systems)
    charge = np.zeros((kk, width))
    size = np.zeros((kk, width))
    lam0 = np.zeros((kk, width))
    for k, s in enumerate(systems):
        ns = s.n_steps + 1
        charge[k, :ns] = s.charges
        size[k, :ns] = s.ion_size_angstrom
        lam0[k, :ns] = _lambda0(s, db)
    for a in (charge, size, lam0):
        a.setflags(write=False)
    blk = _LayoutBlock(tuple(systems), width, charge, size, lam0, {})
    if len(_LAYOUTS) >= _LAYOUTS_MAX:
        _LAYOUTS.clear()
    _LAYOUTS[key] = (db, blk)
    return blk


#: (id(system), the batch's distinct temperatures as bytes) -> (system, cumulative pK
#: array), and (id(db), temperatures) -> (db, water terms): the same computation on the
#: same input array, done once. Arrays are read-only (callers index copies out of them);
#: the object kept with each entry guards against a reused id.
_CUM_PK: dict[tuple[int, bytes], tuple[SystemData, NDArray]] = {}
_WATER: dict[tuple[int, bytes], tuple[ThermoDatabase, dict[str, NDArray]]] = {}
_T_CACHE_MAX = 4096
#: Only small sets of distinct temperatures are cached (bounds the bytes held; a batch
#: with many temperatures amortises the evaluation anyway).
_T_CACHE_MAX_TEMPS = 16


def _cum_pk_at(s: SystemData, t_unique: NDArray, t_key: bytes) -> NDArray:
    """``cumulative_pk`` of ``s`` at the distinct temperatures ``t_unique`` [°C] (cached)."""
    key = (id(s), t_key)
    got = _CUM_PK.get(key)
    if got is not None and got[0] is s:
        return got[1]
    cum = cumulative_pk(np.atleast_2d(s.pka(t_unique)))
    if t_unique.shape[0] > _T_CACHE_MAX_TEMPS:
        return cum
    cum.setflags(write=False)
    if len(_CUM_PK) >= _T_CACHE_MAX:
        _CUM_PK.clear()
    _CUM_PK[key] = (s, cum)
    return cum


def _water_terms_at(t_unique: NDArray, t_key: bytes, db: ThermoDatabase) -> dict[str, NDArray]:
    """``water_terms`` at the distinct temperatures ``t_unique`` [°C] (cached, read-only)."""
    key = (id(db), t_key)
    got = _WATER.get(key)
    if got is not None and got[0] is db:
        return got[1]
    terms = water_terms(t_unique, db)
    if t_unique.shape[0] > _T_CACHE_MAX_TEMPS:
        return terms
    for v in terms.values():
        v.setflags(write=False)
    if len(_WATER) >= _T_CACHE_MAX:
        _WATER.clear()
    _WATER[key] = (db, terms)
    return terms


def water_terms(temperature_c: NDArray, db: ThermoDatabase) -> dict[str, NDArray]:
    """The per-stream water constants of a BalanceProblem at each temperature [°C]:
    pKw, Debye–Hückel A and B, and the ion sizes of H+ and OH− [Å]."""
    n = temperature_c.shape[0]
    return {
        "pkw": np.asarray(db.pkw(temperature_c), dtype=float),
        "a_dh": np.asarray(water.debye_huckel_a(temperature_c), dtype=float),
        "b_dh": np.asarray(water.debye_huckel_b(temperature_c), dtype=float),
        "size_h": np.full(n, db.ion_size("H+")),
        "size_oh": np.full(n, db.ion_size("OH-")),
    }


_LAMBDA0: dict[tuple[int, int], list[float]] = {}


def _lambda0(s: SystemData, db: ThermoDatabase) -> list[float]:
    key = (id(s), id(db))
    if key not in _LAMBDA0 and s.builtin:
        _LAMBDA0[key] = _lambda0_of(s, db)
    return _LAMBDA0[key] if s.builtin else _lambda0_of(s, db)


def _lambda0_of(s: SystemData, db: ThermoDatabase) -> list[float]:
    return [db.limiting_conductivity(sp) or 0.0 if z else 0.0 for sp, z in zip(s.species, s.charges)]
