"""Ionic strength and single-ion activity coefficients (Davies, extended Debye-Hueckel).

Formation constants measured in a constant ionic medium are conditional on it [common practice]; these
functions move a constant between the medium (ionic strength I, mol/L) and the thermodynamic standard
state (I -> 0):

    log beta(I) = log beta0 + p log g_M + q log g_L + r log g_H - log g_s,
    z_s = p z_M + q z_L + r z_H,

for a species M_p L_q H_r with overall constant beta = [s] / ([M]^p [L]^q [H]^r) (see
planner.model.speciation).
All logs are base 10. Vectorised over ionic strengths (tubes) and species.
"""

from __future__ import annotations

import warnings

import numpy as np

__all__ = [
    "ActivityWarning",
    "DAVIES_A_25C",
    "DAVIES_MAX_I_M",
    "H_SIZE_ANGSTROM",
    "MODELS",
    "debye_huckel_A",
    "debye_huckel_B",
    "davies_log_gamma",
    "extended_dh_log_gamma",
    "ionic_strength",
    "log_beta_at_ionic_strength",
    "log_beta_to_zero_ionic_strength",
]

# Davies (1962), *Ion Association*, Butterworths: A = 0.509 at 25 C (log10, (L/mol)^1/2).
DAVIES_A_25C = 0.509
# Above this the Davies equation is no longer a usable approximation (Davies 1962; poor above
# 0.1-0.5 M); a warning is raised.
DAVIES_MAX_I_M = 0.5
# the activity models accepted by log_beta_at_ionic_strength / log_beta_to_zero_ionic_strength
MODELS = ("davies", "extended-dh", "none")
# ion size of H+ in Kielland's table (Kielland 1937, JACS 59:1675), used when no size is given for it
H_SIZE_ANGSTROM = 9.0

# CODATA 2018 exact / recommended values (SI)
_E_C = 1.602176634e-19  # elementary charge, C
_EPS0 = 8.8541878128e-12  # vacuum permittivity, F/m
_K_B = 1.380649e-23  # Boltzmann constant, J/K
_N_A = 6.02214076e23  # Avogadro constant, 1/mol


class ActivityWarning(UserWarning):
    """An activity model is used outside the ionic-strength range where it is reliable."""


def ionic_strength(conc_M, charges) -> np.ndarray:
    """Ionic strength I = 1/2 sum_i c_i z_i^2.

    Parameters
    ----------
    conc_M : array_like, shape (..., n_ions)
        Concentration of each ion, mol/L (>= 0).
    charges : array_like, shape (n_ions,)
        Charge number of each ion.

    Returns
    -------
    numpy.ndarray, shape (...)
        Ionic strength, mol/L.
    """
    conc = np.asarray(conc_M, dtype=float)
    z = np.asarray(charges, dtype=float)
    if z.ndim != 1 or conc.shape[-1:] != z.shape:
        raise ValueError(
            f"conc_M has last axis {conc.shape[-1:]} but charges has shape {z.shape}: give one charge "
            f"per ion "
            "(last axis of conc_M)"
        )
    if np.any(~np.isfinite(conc)) or np.any(conc < 0.0):
        raise ValueError("conc_M must be finite and >= 0 (mol/L)")
    return 0.5 * (conc * z * z).sum(axis=-1)


def _water_permittivity(temperature_C):
    """Relative permittivity of water, Malmberg & Maryott 1956, J. Res. NBS 56:1 (0-100 C)."""
    t = temperature_C
    return 87.740 - 0.40008 * t + 9.398e-4 * t**2 - 1.410e-6 * t**3


def _water_density_kg_m3(temperature_C):
    """Density of air-free water at 1 atm, Kell 1975, J. Chem. Eng. Data 20:97 (0-150 C)."""
    t = temperature_C
    num = (
        999.83952
        + 16.945176 * t
        - 7.9870401e-3 * t**2
        - 46.170461e-6 * t**3
        + 105.56302e-9 * t**4
        - 280.54253e-12 * t**5
    )
    return num / (1.0 + 16.879850e-3 * t)


def _check_temperature(temperature_C):
    t = float(temperature_C)
    if not 0.0 <= t <= 100.0:
        raise ValueError(
            f"temperature_C = {t} is outside 0-100 C, the range of the water permittivity correlation "
            "(Malmberg & Maryott 1956); pass A explicitly for other temperatures"
        )
    return t


def _bjerrum_length_m(t):
    return _E_C**2 / (4.0 * np.pi * _EPS0 * _water_permittivity(t) * _K_B * (t + 273.15))


def debye_huckel_A(temperature_C) -> float:
    """Debye-Hueckel limiting-law constant A (log10, (kg/mol)^1/2) of water at a temperature.

    A = (2 pi N_A rho_w)^(1/2) l_B^(3/2) / ln 10, with the Bjerrum length l_B = e^2 / (4 pi eps0 eps_r k T)
    (Debye & Hueckel 1923, Phys. Z. 24:185; e.g. Robinson & Stokes 1959, *Electrolyte Solutions*, ch. 9),
    eps_r of water from Malmberg & Maryott 1956 (J. Res. NBS 56:1), its density from Kell 1975
    (J. Chem. Eng. Data 20:97), CODATA 2018 constants. Molal scale (I in mol/kg); the molar-scale value
    is A / sqrt(rho_w in kg/L), 0.15 % larger at 25 C. Gives 0.5108 at 25 C; tabulated values range from
    0.5085 (the constants behind Kielland's table) to 0.511, depending on the permittivity data used.

    Parameters
    ----------
    temperature_C : float
        0-100 C.
    """
    t = _check_temperature(temperature_C)
    lB = _bjerrum_length_m(t)
    return float(np.sqrt(2.0 * np.pi * _N_A * _water_density_kg_m3(t)) * lB**1.5 / np.log(10.0))


def debye_huckel_B(temperature_C) -> float:
    """Debye-Hueckel constant B (1/Angstrom, (kg/mol)^1/2): kappa = B sqrt(I), B = (8 pi N_A rho_w l_B)^(1/2).

    Same sources as :func:`debye_huckel_A`; 0.3287 at 25 C (Kielland's table uses 0.3281).
    """
    t = _check_temperature(temperature_C)
    return float(np.sqrt(8.0 * np.pi * _N_A * _water_density_kg_m3(t) * _bjerrum_length_m(t)) * 1e-10)


def _check_I(I_M):
    I_M = np.asarray(I_M, dtype=float)
    if np.any(~np.isfinite(I_M)) or np.any(I_M < 0.0):
        raise ValueError("I_M (ionic strength, mol/L) must be finite and >= 0")
    return I_M


def davies_log_gamma(z, I_M, A=None, temperature_C=25.0) -> np.ndarray:
    """log10 of a single-ion activity coefficient by the Davies equation.

    log g = -A z^2 (sqrt(I) / (1 + sqrt(I)) - 0.3 I)  (Davies 1962, *Ion Association*, Butterworths).

    Parameters
    ----------
    z : array_like
        Charge number(s); broadcasts with ``I_M``.
    I_M : array_like
        Ionic strength, mol/L. An :class:`ActivityWarning` is issued above 0.5 M.
    A : float, optional
        Debye-Hueckel constant. Default: Davies' 0.509 at 25 C, scaled to ``temperature_C`` by the
        theoretical ratio debye_huckel_A(T) / debye_huckel_A(25).
    temperature_C : float
        Used only when ``A`` is None.
    """
    I_M = _check_I(I_M)
    z = np.asarray(z, dtype=float)
    if A is None:
        A = DAVIES_A_25C
        if float(temperature_C) != 25.0:
            A = DAVIES_A_25C * debye_huckel_A(temperature_C) / debye_huckel_A(25.0)
    if np.any(I_M > DAVIES_MAX_I_M):
        warnings.warn(
            f"Davies equation used at I = {float(np.max(I_M)):.3g} M, above {DAVIES_MAX_I_M} M where it is "
            "unreliable; measure the constant in the working medium or use a specific-ion-interaction model",
            ActivityWarning,
            stacklevel=2,
        )
    sI = np.sqrt(I_M)
    return -A * z * z * (sI / (1.0 + sI) - 0.3 * I_M)


def extended_dh_log_gamma(z, I_M, a_angstrom, A=0.5085, B=0.3281) -> np.ndarray:
    """log10 of a single-ion activity coefficient by the extended Debye-Hueckel equation.

    log g = -A z^2 sqrt(I) / (1 + B a sqrt(I)), with the ion-size parameter a of Kielland (1937, JACS
    59:1675); A = 0.5085, B = 0.3281 1/Angstrom (25 C) reproduce Kielland's table within 0.005 in g up
    to I = 0.1 (as reproduced in Freeze & Cherry 1979, *Groundwater*, App. IV). Intended for I <= 0.1.

    Parameters
    ----------
    z, I_M, a_angstrom : array_like
        Charge number, ionic strength (mol/L) and ion size (Angstrom, > 0); broadcast together.
    A, B : float
        Debye-Hueckel constants (see :func:`debye_huckel_A`, :func:`debye_huckel_B` for other T).
    """
    I_M = _check_I(I_M)
    z = np.asarray(z, dtype=float)
    a = np.asarray(a_angstrom, dtype=float)
    if np.any(~np.isfinite(a)) or np.any(a <= 0.0):
        raise ValueError("a_angstrom (ion size, Angstrom) must be finite and > 0")
    sI = np.sqrt(I_M)
    return -A * z * z * sI / (1.0 + B * a * sI)


def _correction(stoich_pqr, charges_MLH, I_M, model, A, B, temperature_C, sizes_angstrom):
    """p log g_M + q log g_L + r log g_H - log g_s, shape I_M.shape + (S,)."""
    st = np.asarray(stoich_pqr)
    if st.ndim != 2 or st.shape[1] != 3:
        raise ValueError(f"stoich_pqr must have shape (S, 3) with columns p, q, r; got shape {st.shape}")
    if st.dtype.kind not in "iu" and np.any(st != np.round(st)):
        raise ValueError("stoich_pqr must hold integers")
    st = st.astype(float)
    zs = np.asarray(charges_MLH, dtype=float)
    if zs.shape == (2,):
        zs = np.append(zs, 1.0)  # the proton's charge
    if zs.shape != (3,):
        raise ValueError(f"charges_MLH must be (z_M, z_L) or (z_M, z_L, z_H); got shape {zs.shape}")
    z_species = st @ zs
    z_all = np.concatenate([zs, z_species])  # M, L, H, then each species
    I_M = _check_I(I_M)
    Ib = I_M[..., None]
    S = st.shape[0]
    if model == "none":
        return np.zeros(I_M.shape + (S,))
    if model == "davies":
        lg = davies_log_gamma(z_all, Ib, A=A, temperature_C=temperature_C)
    elif model == "extended-dh":
        lg = extended_dh_log_gamma(
            z_all, Ib, _sizes(sizes_angstrom, S), A=0.5085 if A is None else A, B=0.3281 if B is None else B
        )
    else:
        raise ValueError(f"unknown activity model {model!r}; choose one of {', '.join(MODELS)}")
    # a species' correction: sum of its components' log g (weights p, q, r) minus its own
    return lg[..., :3] @ st.T - lg[..., 3:]


def _sizes(sizes_angstrom, S):
    """Ion sizes in the order M, L, H, species from a scalar, 2 + S (no H) or 3 + S values."""
    if sizes_angstrom is None:
        raise ValueError(
            "model='extended-dh' needs sizes_angstrom: one ion size (Angstrom) for all, 2 + S values "
            "(M, L, then each species; H+ takes Kielland's 9 A) or 3 + S values (M, L, H, species)"
        )
    a = np.asarray(sizes_angstrom, dtype=float)
    if a.ndim == 0:
        return np.full(3 + S, float(a))
    if a.shape == (2 + S,):
        return np.concatenate([a[:2], [H_SIZE_ANGSTROM], a[2:]])
    if a.shape == (3 + S,):
        return a
    raise ValueError(
        f"sizes_angstrom must be a scalar, 2 + S = {2 + S} values (M, L, species) or 3 + S = {3 + S} "
        f"values (M, L, H, species); got shape {a.shape}"
    )


def log_beta_at_ionic_strength(
    log_beta0,
    stoich_pqr,
    charges_MLH,
    I_M,
    model="davies",
    *,
    A=None,
    B=None,
    temperature_C=25.0,
    sizes_angstrom=None,
) -> np.ndarray:
    """Convert thermodynamic (I -> 0) constants to a medium of ionic strength I.

    log beta(I) = log beta0 + p log g_M + q log g_L + r log g_H - log g_s, with the species charge
    z_s = p z_M + q z_L + r z_H and the activity coefficients from the chosen model (Davies 1962, or
    the extended Debye-Hueckel equation with Kielland's ion sizes).

    Parameters
    ----------
    log_beta0 : array_like, shape (..., S)
        log10 of the constants at I = 0.
    stoich_pqr : array_like of int, shape (S, 3)
        Columns p, q, r of each species.
    charges_MLH : sequence
        (z_M, z_L) or (z_M, z_L, z_H); z_H defaults to +1.
    I_M : array_like, shape (...)
        Ionic strength of each tube, mol/L.
    model : {"davies", "extended-dh", "none"}
        "none" applies no correction (constants used as given).
    A, B : float, optional
        Override the Debye-Hueckel constants (Davies uses A only).
    temperature_C : float
        For the default Davies A.
    sizes_angstrom : float or array_like, optional
        Ion sizes (Angstrom) for "extended-dh": one for all ions, 2 + S values (M, L, then each
        species; H+ takes Kielland's 9 A) or 3 + S values (M, L, H, then each species). Ignored by
        the other models.

    Returns
    -------
    numpy.ndarray, shape broadcast(log_beta0.shape, I_M.shape + (S,))
    """
    corr = _correction(stoich_pqr, charges_MLH, I_M, model, A, B, temperature_C, sizes_angstrom)
    return np.asarray(log_beta0, dtype=float) + corr


def log_beta_to_zero_ionic_strength(log_beta_I, *conditions, **options) -> np.ndarray:
    """The inverse of :func:`log_beta_at_ionic_strength`: constants measured at I back to I -> 0.

    log beta0 = log beta(I) - (p log g_M + q log g_L + r log g_H - log g_s); ``conditions`` and
    ``options`` as there (stoich_pqr, charges_MLH, I_M, model; A, B, temperature_C, sizes_angstrom).
    """
    zero = np.zeros_like(np.asarray(log_beta_I, dtype=float))
    return np.asarray(log_beta_I, dtype=float) - log_beta_at_ionic_strength(zero, *conditions, **options)
