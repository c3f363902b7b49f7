"""The solver loop's species-major kernel (``models.solver._LoopKernel``) against the
reference ``BalanceKernel``: same G, dG/dpH, ionic strength, P and N at any pH and ionic
strength, and dI/dpH equal to a central difference — for closed and open systems, a
custom system whose top species carries +2, every activity model and mixed batches."""

from __future__ import annotations

import numpy as np
import pytest

from models.prepare import assemble, parse_stream
from models.solver import BalanceKernel, _LoopKernel
from models.stream import CustomSystem, Entry, StreamSpec
from models.thermo import load_database

MODELS = ("ideal", "davies", "extended_debye_huckel")


def _specs(model: str) -> list[StreamSpec]:
    plus2 = CustomSystem("diamine", (3.1, 6.7, 9.9), 2, None)
    return [
        StreamSpec((Entry("carbonate", 2.0, "mmol/L"), Entry("Na+", 3.0, "mmol/L"),
                    Entry("ammonia", 0.7, "mmol/L"), Entry("phosphate", 0.4, "mmol/L")),
                   temperature_c=12.0, activity_model=model),
        StreamSpec((Entry("sulfate", 5.0, "mmol/L"), Entry("Ca2+", 2.0, "mmol/L"),
                    Entry("acetate", 1.0, "mmol/L"), Entry("borate", 0.3, "mmol/L")),
                   temperature_c=60.0, activity_model=model),
        StreamSpec((Entry("diamine", 1.5, "mmol/L"), Entry("Cl-", 2.0, "mmol/L")),
                   activity_model=model, custom_systems=(plus2,)),
        StreamSpec((Entry("carbonate", 1.0, "mmol/L"), Entry("Na+", 20.0, "mmol/L"),
                    Entry("Cl-", 19.0, "mmol/L")),
                   temperature_c=35.0, activity_model=model, co2_partial_pressure_atm=0.01),
        StreamSpec((Entry("Na+", 1.0, "mmol/L"),), activity_model=model),
    ]


def _problem(specs: list[StreamSpec]):
    db = load_database()
    return assemble([parse_stream(s, db) for s in specs], db).problem


def _reference(p, ph, ionic):
    k = BalanceKernel(p)
    lg, lh, loh = k.log_gammas(ionic)
    return k.evaluate(ph, lg, lh, loh)


@pytest.mark.parametrize("mix", [*MODELS, "mixed"])
def test_loop_kernel_matches_the_reference_kernel(mix: str) -> None:
    specs = [s for m in (MODELS if mix == "mixed" else (mix,)) for s in _specs(m)]
    p = _problem(specs)
    assert p.is_open.any() and p.charge[..., 0].max() == 2
    codes = np.unique(p.activity_code)
    kern = _LoopKernel(p, int(codes[0]) if codes.size == 1 else None)
    n = p.n_streams
    for ph0 in (-0.5, 2.0, 6.3, 9.8, 14.5):
        ph = ph0 + np.linspace(0.0, 0.4, n)
        ionic = np.where(p.activity_code == 0, 0.0, np.linspace(1e-4, 0.3, n))
        g, dg, i_new, di, pos, neg, _, _ = kern.evaluate(ph, ionic)
        g_ref, dg_ref, i_ref, pos_ref, neg_ref = _reference(p, ph, ionic)
        np.testing.assert_allclose(pos, pos_ref, rtol=1e-12)
        np.testing.assert_allclose(neg, neg_ref, rtol=1e-12)
        np.testing.assert_allclose(g, g_ref, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(dg, dg_ref, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(i_new, i_ref, rtol=1e-12)
        h = 1e-5
        i_up = kern.evaluate(ph + h, ionic)[2]
        i_dn = kern.evaluate(ph - h, ionic)[2]
        np.testing.assert_allclose(di, (i_up - i_dn) / (2 * h), rtol=1e-5, atol=1e-12 * i_new.max())


@pytest.mark.parametrize("mix", [*MODELS, "mixed"])
def test_loop_kernel_take_is_the_kernel_of_the_sub_batch(mix: str) -> None:
    specs = [s for m in (MODELS if mix == "mixed" else (mix,)) for s in _specs(m)]
    p = _problem(specs)
    codes = np.unique(p.activity_code)
    code = int(codes[0]) if codes.size == 1 else None
    idx = np.array([4, 1, 3])
    ph, ionic = np.array([3.0, 7.5, 11.0]), np.array([0.01, 0.002, 0.05])
    a = _LoopKernel(p, code).take(idx).evaluate(ph, ionic)
    b = _LoopKernel(p.take(idx), code).evaluate(ph, ionic)
    for x, y in zip(a, b):
        assert np.array_equal(x, y)


def test_a_stream_with_many_systems_gets_the_same_answer_alone_or_in_a_batch() -> None:
    # Slot sums run over the slot axis of (K, N) arrays; numpy sums a (K, 1) array's
    # column pairwise from 8 terms on but a (K, N) one term by term, so the kernel adds
    # slots one by one: a lone stream (or the last one left in a compacted batch) must
    # round exactly as it does among others.
    from models.equilibrium import solve_many

    names = ("carbonate", "phosphate", "ammonia", "acetate", "sulfate", "borate",
             "sulfide", "formate", "propionate", "fluoride", "nitrite", "silicate")
    target = StreamSpec(tuple(Entry(s, 0.1 + 0.23 * i, "mmol/L") for i, s in enumerate(names))
                        + (Entry("Na+", 4.0, "mmol/L"),), temperature_c=31.0)
    others = [StreamSpec((Entry("Na+", 40.0 * k, "mmol/L"), Entry("sulfate", 9.0 * k, "mmol/L"),
                          *(Entry(s, 0.5 * k, "mmol/L") for s in names[:9])), 60.0)
              for k in range(1, 4)]
    alone = solve_many([target])[0]
    mixed = solve_many(others[:2] + [target] + others[2:])[2]
    assert mixed.ph == alone.ph
    assert mixed.ionic_strength_mol_l == alone.ionic_strength_mol_l


@pytest.mark.parametrize("model", MODELS)
def test_loop_kernel_rounds_a_stream_alike_whatever_the_batch_size(model: str) -> None:
    names = ("carbonate", "phosphate", "ammonia", "acetate", "sulfate", "borate",
             "sulfide", "formate", "propionate", "fluoride", "nitrite", "silicate")
    specs = [StreamSpec(tuple(Entry(s, 0.1 + 0.23 * ((i + k) % 5), "mmol/L")
                              for i, s in enumerate(names)) + (Entry("Na+", 4.0 + k, "mmol/L"),),
                        temperature_c=20.0 + 7 * k, activity_model=model) for k in range(5)]
    p = _problem(specs)
    codes = np.unique(p.activity_code)
    code = int(codes[0])
    ph, ionic = np.linspace(4.0, 9.0, 5), np.linspace(0.001, 0.02, 5)
    batch = _LoopKernel(p, code).evaluate(ph, ionic)
    for i in range(5):
        one = _LoopKernel(p.take(np.array([i])), code).evaluate(ph[i:i + 1], ionic[i:i + 1])
        for x, y in zip(batch, one):
            assert x[i] == y[0]


def test_an_absurd_early_ionic_strength_does_not_poison_the_iteration() -> None:
    # The first Newton step of this stream lands near pH 12.3, where CO2 held by its
    # partial pressure implies ~6 500 mol/kg of carbonate. With activity coefficients at
    # that ionic strength, weights relative to NH4+ overflowed to inf·0 = NaN and the
    # stream never recovered; the solver now evaluates γ at most at GAMMA_IONIC_MAX.
    from models.equilibrium import solve

    amounts = {"Na+": 2.9978, "Cl-": 0.3079, "Ca2+": 0.8456, "borate": 0.7044, "formate": 0.409,
               "phosphate": 0.0439, "silicate": 0.0419, "sulfide": 0.2289, "carbonate": 20.8986,
               "propionate": 0.4385, "fluoride": 0.2849, "nitrite": 0.7864, "acetate": 0.1157,
               "ammonia": 1.6974}
    spec = StreamSpec(tuple(Entry(k, v, "mmol/L") for k, v in amounts.items()),
                      temperature_c=65.51, activity_model="davies", co2_partial_pressure_atm=0.0008901)
    res = solve(spec)
    assert res.ph == pytest.approx(8.4902314252, abs=1e-9)


CYCLING = {
    # Ideal: Newton on the S-shaped G alternated between pH ≈ 0.2 and ≈ 6.8 inside a
    # bracket shrinking by ~0.002 per step, 200 steps, not_converged (before and at 043da86).
    "propionate-80C-ideal": StreamSpec(
        tuple(Entry(k, v, "mmol/L") for k, v in {
            "Na+": 0.0013553, "Cl-": 0.00022455, "Ca2+": 0.00020129, "silicate": 0.00034972,
            "ammonia": 1.0546e-05, "formate": 5.7985e-05, "propionate": 0.021053,
            "sulfate": 0.00013955}.items()),
        temperature_c=80.21, activity_model="ideal"),
    # Ext. Debye–Hückel: a cycle between pH 2.95 and 6.15 that the ionic-strength updates
    # kept from shrinking (converged at 043da86 only by the path it happened to take).
    "silicate-brine-edh": StreamSpec(
        tuple(Entry(k, v, "mmol/L") for k, v in {
            "Na+": 13.602, "Cl-": 18.504, "Ca2+": 105.09, "acetate": 234.85, "nitrite": 1.6695,
            "phosphate": 39.447, "silicate": 773.56, "carbonate": 28.309, "propionate": 25.728,
            "sulfide": 5.0308, "sulfate": 7.6678}.items()),
        temperature_c=24.02, activity_model="extended_debye_huckel"),
}


@pytest.mark.parametrize("name", CYCLING)
def test_a_newton_cycle_inside_the_bracket_is_broken_by_bisection(name: str) -> None:
    from models.equilibrium import solve

    res = solve(CYCLING[name])
    terms = [abs(s.charge * s.mol_l) for s in res.species]
    assert abs(res.charge_balance_residual_mol_l) < 1e-12 * max(terms)
    assert res.iterations <= 25


@pytest.mark.parametrize("mix", [*MODELS, "mixed"])
@pytest.mark.parametrize("slope", [True, False])
def test_stacked_small_batch_evaluation_is_bit_identical_to_the_species_loop(
    mix: str, slope: bool, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Closed systems only (the stacked path's domain): a batch evaluated with stacked arrays
    # (few streams) and with the per-species loop (many) gives the same bits per stream.
    import models.solver as solver

    names = ("carbonate", "phosphate", "ammonia", "acetate", "sulfate", "borate", "silicate")
    models_ = MODELS if mix == "mixed" else (mix,)
    specs = [StreamSpec(tuple(Entry(s, 0.1 + 0.37 * ((i + k) % 4), "mmol/L") for i, s in enumerate(names[: 2 + k]))
                        + (Entry("Na+", 2.0 + k, "mmol/L"), Entry("Cl-", 1.0, "mmol/L")),
                        temperature_c=10.0 + 9 * k, activity_model=models_[k % len(models_)]) for k in range(6)]
    specs.append(StreamSpec((Entry("diamine", 1.5, "mmol/L"), Entry("Cl-", 2.0, "mmol/L")),
                            activity_model=models_[0], custom_systems=(CustomSystem("diamine", (3.1, 6.7), 1, None),)))
    p = _problem(specs)
    assert not p.is_open.any()
    codes = np.unique(p.activity_code)
    kern = _LoopKernel(p, int(codes[0]) if codes.size == 1 else None)
    assert kern.zpos_rest is None and kern.n_sp >= 4
    n = p.n_streams
    for ph0 in (-0.5, 2.0, 6.3, 9.8, 14.5):
        ph = ph0 + np.linspace(0.0, 0.4, n)
        ionic = np.where(p.activity_code == 0, 0.0, np.linspace(1e-4, 0.3, n))
        monkeypatch.setattr(solver, "STACKED_STREAMS", n)
        stacked = kern.evaluate(ph, ionic, slope=slope)
        monkeypatch.setattr(solver, "STACKED_STREAMS", 0)
        looped = kern.evaluate(ph, ionic, slope=slope)
        for x, y in zip(stacked, looped):
            if y is None:
                assert x is None
            else:
                np.testing.assert_array_equal(x, y)
                assert (np.signbit(x) == np.signbit(y)).all()
