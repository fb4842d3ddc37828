"""Chemical shifts and DP4 assignment: the fast checks (no quantum chemistry).

The checks against experiment, which run GIAO DFT, are in tests/test_shifts_experiment.py
(marked slow).
"""

import math

import numpy as np
import pandas as pd
import pytest
from rdkit import Chem
from rdkit.Chem import AllChem
from scipy import integrate, special

from confpop import Ensemble, InputError
from confpop.cli import main
from confpop.nmr.assign import DP4_PARAMETERS, assignment_probabilities
from confpop.nmr.calibration import CALIBRATION_SET
from confpop.nmr.shifts import (SCALING, chemical_shifts, compare_shifts, fit_scaling,
                                nucleus_groups, read_measured_shifts)


def _embedded(smiles, n=1, seed=7):
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    ids = AllChem.EmbedMultipleConfs(mol, n, randomSeed=seed)
    assert len(ids) == n
    return mol


# ---------------------------------------------------------------- calibration data
def test_calibration_set_is_well_formed():
    for entry in CALIBRATION_SET:
        mol = Chem.MolFromSmiles(entry["smiles"])
        maps = {a.GetAtomMapNum() for a in mol.GetAtoms()} - {0}
        assert set(entry["shifts"]) == set(entry["source"]), entry["name"]
        assert set(entry.get("fit_exclude", {})) <= set(entry["shifts"]), entry["name"]
        for signal in entry["shifts"]:
            assert signal[0] in "CH" and int(signal[1:]) in maps, (entry["name"], signal)
            assert entry["source"][signal] in ("G97", "CRC", "F10")


def test_scaling_table_holds_the_default_level_with_its_errors():
    from confpop.backends.shielding import SHIELDING_DEFAULTS
    key = (SHIELDING_DEFAULTS["functional"], SHIELDING_DEFAULTS["basis"])
    assert key in SCALING
    for nucleus, goal in (("13C", 3.0), ("1H", 0.2)):
        p = SCALING[key][nucleus]
        # a shielding scale runs opposite to the shift scale with a slope near -1
        assert -1.15 < p["slope"] < -0.85
        assert p["mae"] <= goal  # the MAE goals after scaling
        assert p["n"] >= 10


def test_fit_scaling_recovers_a_planted_line_and_leave_one_out_sees_noise():
    rng = np.random.default_rng(3)
    sigma = np.linspace(0.0, 200.0, 12)
    table = pd.DataFrame({"name": [f"m{i // 2}" for i in range(12)], "nucleus": "13C",
                          "sigma_ppm": sigma, "measured_ppm": 185.0 - 0.97 * sigma})
    p = fit_scaling(table)["13C"]
    assert p["slope"] == pytest.approx(-0.97, abs=1e-12)
    assert p["intercept"] == pytest.approx(185.0, abs=1e-9)
    assert p["mae"] == pytest.approx(0.0, abs=1e-9)
    noisy = table.assign(measured_ppm=table["measured_ppm"] + rng.normal(0, 1.0, 12))
    q = fit_scaling(noisy)["13C"]
    assert q["loo_mae"] > q["mae"] > 0.1  # out-of-sample error is the larger one


# ---------------------------------------------------------------- equivalence
def test_enantiotopic_methyls_are_one_signal_diastereotopic_ones_two():
    # propan-2-ol: the two methyls are enantiotopic (one 13C signal); in (S)-3-methylbutan-2-ol
    # the isopropyl methyls are diastereotopic (two signals) [common practice]
    groups = nucleus_groups(_embedded("CC(C)O"), "C")
    assert (0, 2) in groups
    mol = _embedded("C[C@H](O)C(C)C")
    carbons = nucleus_groups(mol, "C")
    assert (4,) in carbons and (5,) in carbons
    # the methyl protons of each methyl rotate fast: one group of three each
    h_groups = [g for g in nucleus_groups(mol, "H") if len(g) == 3]
    assert len(h_groups) == 3


def test_toluene_ring_carbons_pair_by_symmetry():
    groups = nucleus_groups(_embedded("Cc1ccccc1"), "C")
    assert sorted(len(g) for g in groups) == [1, 1, 1, 2, 2]


# ---------------------------------------------------------------- averaging
def _two_conformer_ethanol(energies_kcal):
    mol = _embedded("CCO", n=2, seed=11)
    return Ensemble.from_mol(mol, energies=energies_kcal, unit="kcal/mol")


def test_boltzmann_average_of_shifts_follows_the_populations():
    ens = _two_conformer_ethanol([0.0, 0.8])
    n = ens.mol.GetNumAtoms()
    sigma = pd.DataFrame([np.full(n, 150.0), np.full(n, 140.0)], index=[0, 1])
    tms = {"C": 190.0, "H": 32.0}
    temps = [200.0, 298.15, 2000.0]
    table = chemical_shifts(ens, temps, nuclei=("13C",), shieldings=sigma, reference="tms",
                            tms=tms)
    pops = ens.populations(temps)
    for t in temps:
        expected = pops.loc[0, t] * 40.0 + pops.loc[1, t] * 50.0
        np.testing.assert_allclose(table[t].to_numpy(), expected, atol=1e-12)
    # warmer: more of the upper conformer, so the shift moves towards its 50 ppm
    row = table.iloc[0]
    assert row[200.0] < row[298.15] < row[2000.0] < 50.0


def test_equivalent_nuclei_are_averaged_and_labels_are_one_based():
    mol = _embedded("CC(C)=O")  # acetone
    ens = Ensemble.from_mol(mol)
    sigma = np.zeros(mol.GetNumAtoms())
    sigma[0], sigma[2] = 160.0, 162.0  # the two methyl carbons (atoms 1 and 3)
    table = chemical_shifts(ens, 298.15, nuclei=("13C",),
                            shieldings=pd.DataFrame([sigma], index=[0]),
                            reference="tms", tms={"C": 190.0, "H": 32.0})
    methyl = table[table["atoms"] == (0, 2)].iloc[0]
    assert methyl["label"] == "C1/C3"
    assert methyl[298.15] == pytest.approx(29.0)


def test_scaled_shifts_use_the_fitted_line():
    key = next(iter(SCALING))
    p = SCALING[key]["13C"]
    ens = Ensemble.from_mol(_embedded("C"))
    sigma = pd.DataFrame([[190.0] + [31.0] * 4], index=[0])
    sigma.attrs["level"] = {"functional": key[0], "basis": key[1]}
    table = chemical_shifts(ens, 298.15, nuclei=("13C",), shieldings=sigma)
    assert table.attrs["reference"] == "scaling"
    assert table[298.15].iloc[0] == pytest.approx(p["intercept"] + p["slope"] * 190.0)


# ---------------------------------------------------------------- measured shifts
def test_measured_shifts_file_errors_name_the_line(tmp_path):
    bad = tmp_path / "m.csv"
    bad.write_text("nucleus,atom,shift_ppm\n13C,1,20.0\n15N,2,100\n")
    with pytest.raises(InputError, match="data line 2: nucleus must be 1H or 13C"):
        read_measured_shifts(bad)
    bad.write_text("atom,ppm\n1,20\n")
    with pytest.raises(InputError, match="needs the columns atom and shift_ppm"):
        read_measured_shifts(bad)
    bad.write_text("atom,shift_ppm\n0,20\n")
    with pytest.raises(InputError, match="atom must be >= 1"):
        read_measured_shifts(bad)
    with pytest.raises(InputError, match="does not exist"):
        read_measured_shifts(tmp_path / "none.csv")


def test_comparison_errors_mae_and_outliers():
    mol = _embedded("CC(C)=O")
    ens = Ensemble.from_mol(mol)
    sigma = np.zeros(mol.GetNumAtoms())
    sigma[[0, 2]], sigma[1], sigma[3] = 160.0, -15.0, 0.0
    sigma[4:] = 30.0
    table = chemical_shifts(ens, 298.15, shieldings=pd.DataFrame([sigma], index=[0]),
                            reference="tms", tms={"C": 190.0, "H": 32.0})
    # the carbonyl value is planted 15 ppm off to be flagged; the 1H row names the methyl
    # carbon (atom 1), whose three protons are one signal
    measured = pd.DataFrame({"nucleus": ["13C", "13C", "1H"], "atom": [1, 2, 1],
                             "shift_ppm": [30.7, 190.0, 2.17]})
    comp = compare_shifts(table, measured, mol=mol)
    np.testing.assert_allclose(comp["predicted_ppm"], [30.0, 205.0, 2.0])
    np.testing.assert_allclose(comp["error_ppm"], [-0.7, 15.0, -0.17], atol=1e-9)
    assert comp["outlier"].tolist() == [False, True, False]
    assert comp.attrs["mae"]["13C"] == pytest.approx((0.7 + 15.0) / 2)
    assert comp.attrs["mae"]["1H"] == pytest.approx(0.17)


def test_comparison_refuses_a_proton_row_on_a_carbon_without_protons():
    mol = _embedded("CC(C)=O")
    ens = Ensemble.from_mol(mol)
    sigma = np.full(mol.GetNumAtoms(), 30.0)
    table = chemical_shifts(ens, 298.15, shieldings=pd.DataFrame([sigma], index=[0]),
                            reference="tms", tms={"C": 190.0, "H": 32.0})
    measured = pd.DataFrame({"nucleus": ["1H"], "atom": [2], "shift_ppm": [2.17]})
    with pytest.raises(InputError, match="line 1: atom 2 is not a 1H nucleus"):
        compare_shifts(table, measured, mol=mol)


# ---------------------------------------------------------------- DP4
def _t_survival_by_quadrature(x, nu):
    """P(T > x) for Student's t with nu degrees of freedom, integrating its density
    Γ((ν+1)/2) / (√(νπ) Γ(ν/2)) (1 + t²/ν)^(-(ν+1)/2) (textbook formula) numerically."""
    norm = math.exp(special.gammaln((nu + 1) / 2) - special.gammaln(nu / 2)) / math.sqrt(nu * math.pi)
    value, _ = integrate.quad(lambda t: norm * (1 + t * t / nu) ** (-(nu + 1) / 2), x, np.inf)
    return value


def _comparison(measured, predicted, nucleus="13C"):
    n = len(measured)
    return pd.DataFrame({"nucleus": [nucleus] * n, "atom": list(range(1, n + 1)),
                         "label": [f"C{i}" for i in range(1, n + 1)],
                         "measured_ppm": measured, "predicted_ppm": predicted})


def test_dp4_matches_an_independent_quadrature_of_the_t_density():
    measured = [20.0, 70.0]
    a = _comparison(measured, [21.0, 68.5])
    b = _comparison(measured, [25.0, 69.0])
    probs, contrib = assignment_probabilities({"A": a, "B": b}, scaling="fixed")
    sigma, nu = DP4_PARAMETERS["13C"]  # Smith & Goodman 2010: 2.306 ppm, 11.38
    pa = _t_survival_by_quadrature(1.0 / sigma, nu) * _t_survival_by_quadrature(1.5 / sigma, nu)
    pb = _t_survival_by_quadrature(5.0 / sigma, nu) * _t_survival_by_quadrature(1.0 / sigma, nu)
    assert probs.loc["A", "P_all"] == pytest.approx(pa / (pa + pb), rel=1e-7)
    assert probs["P_all"].sum() == pytest.approx(1.0)
    first = contrib[(contrib.candidate == "A") & (contrib.atom == 1)].iloc[0]
    assert first["log_term"] == pytest.approx(math.log(_t_survival_by_quadrature(1 / sigma, nu)),
                                              rel=1e-7)


def test_dp4_identities():
    measured = [10.0, 40.0, 80.0, 120.0, 160.0, 200.0]
    same = _comparison(measured, [11.0, 39.0, 82.0, 119.0, 161.0, 198.0])
    probs, _ = assignment_probabilities({"A": same, "B": same.copy()})
    np.testing.assert_allclose(probs["P_all"], [0.5, 0.5])
    # a uniform offset is removed by the per-candidate scaling (the paper's) but not by "fixed"
    shifted = same.assign(predicted_ppm=same["predicted_ppm"] + 4.0)
    p_candidate, _ = assignment_probabilities({"A": same, "B": shifted}, scaling="candidate")
    np.testing.assert_allclose(p_candidate["P_all"], [0.5, 0.5], atol=1e-9)
    p_fixed, _ = assignment_probabilities({"A": same, "B": shifted}, scaling="fixed")
    assert p_fixed.loc["A", "P_all"] > 0.99
    with pytest.raises(InputError, match="at least two candidates"):
        assignment_probabilities({"A": same})


def test_dp4_per_nucleus_and_combined_probabilities():
    c = _comparison([20.0, 70.0], [21.0, 69.0])
    h = _comparison([1.0, 3.5], [1.1, 3.4], nucleus="1H")
    good = pd.concat([c, h], ignore_index=True)
    bad = good.assign(predicted_ppm=[26.0, 69.0, 1.0, 3.6])
    probs, _ = assignment_probabilities({"good": good, "bad": bad}, scaling="fixed")
    assert probs.loc["good", "P_13C"] > 0.9
    assert 0.3 < probs.loc["good", "P_1H"] < 0.7  # 1H errors are alike: no information
    assert probs.loc["good", "P_all"] > probs.loc["good", "P_1H"]
    for col in ("P_13C", "P_1H", "P_all"):
        assert probs[col].sum() == pytest.approx(1.0)


# ---------------------------------------------------------------- command line
def test_cli_refuses_a_bad_measured_file_before_any_work(tmp_path, capsys):
    bad = tmp_path / "m.csv"
    bad.write_text("atom,shift_ppm\nx,20\n")
    status = main(["shifts", "CCO", "--measured", str(bad)])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert len(err) == 1 and "--measured" in err[0] and "data line 1" in err[0]


def test_cli_enumerate_stereo_needs_one_input(capsys):
    status = main(["shifts", "CC=CC", "CCC", "--enumerate-stereo"])
    assert status == 2
    assert "--enumerate-stereo takes one INPUT" in capsys.readouterr().err


def test_cli_refuses_a_spectrum_count_that_matches_no_pairing(tmp_path, capsys):
    files = []
    for name in ("a.csv", "b.csv", "c.csv"):
        path = tmp_path / name
        path.write_text("nucleus,atom,shift_ppm\n13C,1,20.0\n")
        files.append(str(path))
    status = main(["shifts", "C/C=C/C", "C/C=C\\C", "--measured", *files])
    err = capsys.readouterr().err.strip().splitlines()
    assert status == 2
    assert len(err) == 1 and "3 files for 2 candidates" in err[0]


def test_shieldings_are_stored_and_reused(tmp_path):
    # Hartree-Fock/STO-3G water: the smallest run of the real shielding route
    from confpop.nmr.shifts import conformer_shieldings
    from confpop.store import ResultStore
    ens = Ensemble.from_mol(_embedded("O", n=2, seed=5))
    path = tmp_path / "store.sqlite"
    first = conformer_shieldings(ens, functional="hf", basis="sto-3g", workers=1, store=path)
    with ResultStore(path) as store:
        assert len(store) == 2
    second = conformer_shieldings(ens, functional="hf", basis="sto-3g", workers=1, store=path)
    pd.testing.assert_frame_equal(first, second)
    assert first.shape == (2, 3) and np.all(first.to_numpy() > 0)
    with pytest.raises(InputError, match="implicit solvent are not available"):
        from confpop.backends.shielding import compute_shieldings
        compute_shieldings(["O", "H", "H"], ens.positions(0), solvent="water")
