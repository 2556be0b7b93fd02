"""The numerical model of a plan (arrays built once by :func:`planner.jobs.compile.build_model`) and the
prediction of every tube: speciation, ionic strength, absorbance and its photometric sd.

It puts together the pure numerical modules of this layer (:mod:`planner.model.speciation`,
:mod:`planner.model.activity`, :mod:`planner.model.optics`).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from . import activity, closed_forms, optics, speciation

IONIC_STRENGTH_WARN_M = 0.5  # Davies is poor above this [source: Davies 1962, Ion Association]
ACTIVITY_ITERATIONS = 4  # fixed-point passes I -> constants -> speciation -> I; converges in 2–3


@dataclass(frozen=True)
class Model:
    """Everything the numerics need from a plan, as arrays.

    Attributes
    ----------
    species : names of the S species (complexes, protonated and hydroxo forms).
    stoich : (S, 3) int, columns p, q, r of M_p L_q H_r.
    log_beta, log_beta_sd : (S,) guessed overall constants (log10, in the plan's medium) and their sd.
    pH : buffered pH, or None when protons are not a component.
    charges : (3,) charges of M, L, H.
    sizes_angstrom : (2 + S,) ion-size parameters of M, L and each species (extended Debye–Hückel).
    absorbers : names of the 2 + S absorbing candidates: "M", "L", then the species.
    epsilon_M_cm, epsilon_rsd : (2 + S,) molar absorptivities (L mol⁻¹ cm⁻¹) and relative sd.
    path_cm, stray_light, noise_k : path length, stray-light fraction, (k1, k2, k3).
    display_step : absorbance display resolution.
    linear_range : (lo, hi) absorbance window.
    stock_ids : the K stock ids in plan order.
    stock_conc_M : (K, 2) M and L in each stock, mol/L.
    stock_conc_rsd : (K,) relative standard uncertainty of each stock's concentration.
    ion_names, ion_charges : the other ions named in stocks; stock_ion_M (K, n_ions) their concentrations.
    activity_model : "davies" | "extended-dh" | "none".
    reference_ionic_strength_M : ionic strength the constants refer to, or None (no correction).
    temperature_C : temperature of the study.
    """

    species: tuple[str, ...]
    stoich: np.ndarray
    log_beta: np.ndarray
    log_beta_sd: np.ndarray
    pH: float | None
    charges: np.ndarray
    sizes_angstrom: np.ndarray
    absorbers: tuple[str, ...]
    epsilon_M_cm: np.ndarray
    epsilon_rsd: np.ndarray
    path_cm: float
    stray_light: float
    noise_k: tuple[float, float, float]
    display_step: float
    linear_range: tuple[float, float]
    stock_ids: tuple[str, ...]
    stock_conc_M: np.ndarray
    stock_conc_rsd: np.ndarray
    ion_names: tuple[str, ...]
    ion_charges: np.ndarray
    stock_ion_M: np.ndarray
    activity_model: str
    reference_ionic_strength_M: float | None
    temperature_C: float

    def __repr__(self) -> str:
        return (
            f"Model(species={list(self.species)}, stocks={list(self.stock_ids)}, "
            f"absorbers={[a for a, e in zip(self.absorbers, self.epsilon_M_cm, strict=True) if e > 0]})"
        )

    @property
    def stoich_pq(self) -> np.ndarray:
        return self.stoich[:, :2]

    @property
    def species_charges(self) -> np.ndarray:
        return self.stoich @ self.charges

    @property
    def complex_mask(self) -> np.ndarray:
        """(S,) True for species holding both M and L (what 'bound' means for saturation)."""
        return (self.stoich[:, 0] > 0) & (self.stoich[:, 1] > 0)

    def index(self, species: str) -> int:
        return self.species.index(species)


@dataclass(frozen=True)
class TubeState:
    """What each tube is expected to hold and read.

    Attributes
    ----------
    totals_M : (..., n, 2) total M and L, mol/L.
    free_M, free_L : (..., n) free concentrations, mol/L.
    species_M : (..., n, S) concentration of every species, mol/L.
    log_beta : (..., n, S) constants in force in each tube (after any ionic-strength correction).
    ionic_strength_M : (..., n).
    absorbance_true : (..., n) Beer–Lambert absorbance.
    absorbance : (..., n) expected reading (stray light included).
    absorbance_sd : (..., n) photometric sd of one reading.
    saturation : (..., n) fraction of the limiting component bound in complexes (M and L both present).
    """

    totals_M: np.ndarray
    free_M: np.ndarray
    free_L: np.ndarray
    species_M: np.ndarray
    log_beta: np.ndarray
    ionic_strength_M: np.ndarray
    absorbance_true: np.ndarray
    absorbance: np.ndarray
    absorbance_sd: np.ndarray
    saturation: np.ndarray

    def __repr__(self) -> str:
        return f"TubeState({self.absorbance.shape[-1]} tubes, A = {np.round(self.absorbance, 3).tolist()})"

    def __getitem__(self, index) -> TubeState:
        """The state of a part of the batch: every field indexed alike along its leading axes, e.g.
        ``state[g]`` for prior node g or ``state[:, :C]`` for the first C tubes of every node."""
        return TubeState(*(getattr(self, f)[index] for f in TubeState.__dataclass_fields__))

    def absorber_conc_M(self) -> np.ndarray:
        """(..., n, 2 + S) concentrations in the order of Model.absorbers."""
        return np.concatenate([self.free_M[..., None], self.free_L[..., None], self.species_M], axis=-1)


def ionic_strength_M(model: Model, free_M, free_L, species_M, ion_M) -> np.ndarray:
    """I = ½ Σ c z² over free components, species and the stocks' other ions."""
    zM, zL = model.charges[0], model.charges[1]
    zs = model.species_charges
    i2 = zM**2 * free_M + zL**2 * free_L + np.sum(species_M * zs**2, axis=-1)
    if len(model.ion_names):
        i2 = i2 + np.sum(ion_M * model.ion_charges**2, axis=-1)
    return 0.5 * i2


def tube_ions_M(model: Model, volumes_mL: np.ndarray, total_volume_mL: np.ndarray) -> np.ndarray:
    """(n, n_ions) concentrations of the stocks' other ions in each tube."""
    return (volumes_mL @ model.stock_ion_M) / total_volume_mL[..., None]


def predict(
    model: Model,
    totals: np.ndarray,
    ion_M: np.ndarray | None = None,
    *,
    log_beta: np.ndarray | None = None,
    epsilon_M_cm: np.ndarray | None = None,
    warn: bool = True,
) -> TubeState:
    """Speciation, ionic strength and absorbance of every tube.

    Parameters
    ----------
    totals : (..., n, 2) total M and L, mol/L.
    ion_M : (..., n, n_ions) other ions, mol/L (None: none).
    log_beta : (..., S) or (..., n, S) constants to use instead of the guess (e.g. a Monte-Carlo draw).
    epsilon_M_cm : (..., 2 + S) absorptivities instead of the guess.
    """
    totals = np.asarray(totals, dtype=float)
    M0, L0 = totals[..., 0], totals[..., 1]
    lb = model.log_beta if log_beta is None else np.asarray(log_beta, dtype=float)
    if lb.ndim == totals.ndim - 1:  # (..., S): one set of constants for every tube
        lb = lb[..., None, :]
    if ion_M is None:
        ion_M = np.zeros(totals.shape[:-1] + (len(model.ion_names),))
    correct = model.activity_model != "none" and model.reference_ionic_strength_M is not None
    lb_tube = np.broadcast_to(lb, totals.shape[:-1] + (len(model.species),))
    if correct:
        spec, I, lb_tube = _speciate_with_activity(model, M0, L0, lb, lb_tube, ion_M)
    else:
        spec = _speciate_at(model, M0, L0, lb_tube)
        I = ionic_strength_M(model, spec.free_M, spec.free_L, spec.species_M, ion_M)
    if warn and correct and model.activity_model == "davies" and np.any(I > IONIC_STRENGTH_WARN_M):
        warnings.warn(
            f"ionic strength reaches {float(np.max(I)):.2f} M: the Davies equation is poor above "
            f"{IONIC_STRENGTH_WARN_M} M; treat activity corrections as rough",
            activity.ActivityWarning,
            stacklevel=2,
        )
    eps = model.epsilon_M_cm if epsilon_M_cm is None else np.asarray(epsilon_M_cm, dtype=float)
    if eps.ndim > 1:
        eps = eps[..., None, :]
    conc = np.concatenate([spec.free_M[..., None], spec.free_L[..., None], spec.species_M], axis=-1)
    a_true = optics.beer_lambert(conc, eps, model.path_cm)
    a_obs = optics.with_stray_light(a_true, model.stray_light)
    sd = optics.photometric_sd(a_obs, *model.noise_k, display_step=model.display_step)
    return TubeState(
        totals_M=totals,
        free_M=spec.free_M,
        free_L=spec.free_L,
        species_M=spec.species_M,
        log_beta=lb_tube,
        ionic_strength_M=I,
        absorbance_true=a_true,
        absorbance=a_obs,
        absorbance_sd=sd,
        saturation=saturation(model, totals, spec.species_M),
    )


def _speciate_at(model: Model, M0, L0, lb_tube):
    """Speciation of every tube at its constants (conditional on the plan's pH)."""
    return speciation.speciate(
        M0, L0, model.stoich_pq, closed_forms.conditional_log_beta(lb_tube, model.stoich, model.pH)
    )


def _speciate_with_activity(model: Model, M0, L0, lb, lb_tube, ion_M):
    """Speciation with the constants corrected to each tube's ionic strength: start from the ions alone,
    then iterate I -> constants -> speciation -> I (ACTIVITY_ITERATIONS times). Returns the speciation,
    the ionic strength and the constants used."""
    lb0 = activity.log_beta_to_zero_ionic_strength(
        lb,
        model.stoich,
        model.charges,
        model.reference_ionic_strength_M,
        model=model.activity_model,
        sizes_angstrom=model.sizes_angstrom,
        temperature_C=model.temperature_C,
    )
    I = ionic_strength_M(model, M0, L0, np.zeros(lb_tube.shape), ion_M)
    for _ in range(ACTIVITY_ITERATIONS):
        lb_tube = activity.log_beta_at_ionic_strength(
            lb0,
            model.stoich,
            model.charges,
            I,
            model=model.activity_model,
            sizes_angstrom=model.sizes_angstrom,
            temperature_C=model.temperature_C,
        )
        spec = _speciate_at(model, M0, L0, lb_tube)
        I = ionic_strength_M(model, spec.free_M, spec.free_L, spec.species_M, ion_M)
    return spec, I, lb_tube


def saturation(
    model: Model, totals: np.ndarray, species_M: np.ndarray, *, of: str | None = None
) -> np.ndarray:
    """Saturation of each tube: the fraction of its limiting reagent bound in M–L complexes.

    This is the one definition used by the tube tables, the saturation check and the binding-curve
    figure. The limiting reagent is the component with the smaller total (M when the totals are
    equal); "bound" counts it in every species holding both M and L, weighted by its stoichiometry.
    It is the fractional saturation of binding studies, whose 0.2–0.8 span is where the data fix K
    best [source: Weber 1975, Adv. Protein Chem. 29:1; Deranleau 1969, JACS 91:4044]. Taking the
    limiting reagent (not always the metal) keeps the number meaningful in tubes with the metal in
    excess, where the fraction of metal bound stays near 0 however complete the binding is.

    Parameters
    ----------
    totals : (..., n, 2) total M and L, mol/L.
    species_M : (..., n, S) species concentrations, mol/L.
    of : "M" or "L" to take that component instead of the limiting one (for a smooth curve along
        which the excess reagent falls below the other); None for the limiting reagent.

    Returns
    -------
    (..., n) fraction in [0, 1]; 0 where M or L is absent.
    """
    mask = model.complex_mask
    bound_M = np.sum(species_M[..., mask] * model.stoich[mask, 0], axis=-1)
    bound_L = np.sum(species_M[..., mask] * model.stoich[mask, 1], axis=-1)
    M0, L0 = totals[..., 0], totals[..., 1]
    metal_limits = M0 <= L0 if of is None else np.full(np.shape(M0), of == "M")
    with np.errstate(invalid="ignore", divide="ignore"):
        frac = np.where(
            metal_limits, bound_M / np.where(M0 > 0, M0, 1.0), bound_L / np.where(L0 > 0, L0, 1.0)
        )
    return np.where(np.minimum(M0, L0) > 0, np.clip(frac, 0.0, 1.0), 0.0)
