"""Seeded generators of the invented demo data, each with its documented truth.

Everything in this module is **invented**: the river district, its villages, the clinic that
sends text messages and the published table describe no real place, person or study.  Each
generator draws from :func:`numpy.random.default_rng` with a fixed seed and documents the true
parameters it used, so a demo can show where the truth falls relative to an interval.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pandas is imported inside the functions that need it
    import pandas as pd

IRRIGATION_SEED = 20261201
NUDGE_SEED = 20261202

# --- true parameters of the invented irrigation district -------------------------------------
# Units: maize_yield in t/ha, irrigation_hours in hours per season, height_m in metres.
IRRIGATION_BETA = 0.012  # t/ha per irrigation hour (1.2 t/ha per 100 hours)
IRRIGATION_DIRECT = -0.003  # t/ha per metre of height, holding irrigation fixed
IRRIGATION_FIRST_STAGE = -4.0  # irrigation hours per metre of height
IRRIGATION_N_VILLAGES = 60
SOIL_LEVELS = ("clay", "loam", "sand")
SOIL_SHARES = (0.30, 0.45, 0.25)

# --- true parameters of the invented screening nudge -----------------------------------------
NUDGE_BETA = 0.15  # effect of screening on P(bp_controlled = 1), the same for everybody
NUDGE_DIRECT = 0.02  # effect of the message itself on P(bp_controlled = 1)
# Compliance types: always-takers attend whatever happens, compliers attend only if messaged,
# never-takers never attend (two-sided non-compliance).
NUDGE_TYPE_SHARES = {"always": 0.20, "complier": 0.30, "never": 0.50}

# Printed precision of every column written to CSV; generators round to the same digits so a
# frame read back from the CSV equals the generated frame.
CSV_DECIMALS = {
    "maize_yield": 3,
    "irrigation_hours": 1,
    "height_m": 2,
    "plot_ha": 3,
    "age": 0,
}


@dataclass(frozen=True, slots=True)
class DemoData:
    """An invented demo data set with its documented truth.

    Attributes
    ----------
    name : str
        Short name, also the stem of the example file (``irrigation`` -> ``irrigation.csv``).
    frame : pandas.DataFrame
        One row per unit.
    truth : dict[str, float]
        True parameters used by the generator.  Always has ``beta`` (effect of the treatment
        on the outcome) and ``direct_effect`` (effect of the instrument on the outcome that
        the exclusion restriction sets to zero); also ``first_stage`` (population slope of
        the treatment on the instrument) and ``naive_iv_limit`` (what 2SLS that assumes no
        direct effect converges to: ``beta + direct_effect / first_stage``).
    description : str
        A few sentences saying the data are invented and stating the truth.
    roles : dict
        ``outcome`` (str), ``treatments``, ``instruments``, ``controls`` (tuples of str) and
        ``cluster`` (str or None).
    """

    name: str
    frame: pd.DataFrame
    truth: dict[str, float]
    description: str
    roles: dict

    def __str__(self) -> str:
        return f"{self.name} (invented demo data, {len(self.frame)} rows)\n{self.description}"


def irrigation(n: int = 3000, seed: int = IRRIGATION_SEED) -> DemoData:
    """Invented river district: irrigation hours and maize yield on ``n`` plots.

    Structural model (all invented)

    .. math::

        \\text{hours}_i &= 250 - 4\\,\\text{height}_i - 40\\,m_i
            + \\text{soil}_i + 15\\log(\\text{ha}_i) + a_{v(i)} + e_i \\\\
        \\text{yield}_i &= 2.3 + \\beta\\,\\text{hours}_i + \\gamma\\,\\text{height}_i
            + 0.6\\,m_i + \\text{soil}_i - 0.15\\log(\\text{ha}_i) + b_{v(i)} + u_i

    with :math:`\\beta = 0.012` t/ha per hour, direct effect :math:`\\gamma = -0.003` t/ha
    per metre (higher plots are cooler and drain faster), :math:`m` unobserved soil moisture
    (raises yield, lowers the need to irrigate, so OLS is biased down) and :math:`a_v, b_v`
    village shocks.  Height is independent of soil, plot size, moisture and the shocks, so the
    only failure of the instrument is the direct effect: 2SLS that ignores it tends to
    :math:`\\beta + \\gamma / (-4) = 0.01275`.

    Parameters
    ----------
    n : int
        Number of plots (at least ``IRRIGATION_N_VILLAGES``).
    seed : int
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    DemoData
        Columns ``maize_yield`` (t/ha), ``irrigation_hours`` (hours per season),
        ``height_m`` (metres above the canal intake), ``plot_ha`` (hectares), ``soil``
        (clay/loam/sand) and ``village`` (cluster id ``V01``..``V60``).

    Examples
    --------
    >>> data = irrigation(n=600)
    >>> data.truth["beta"], data.truth["direct_effect"]
    (0.012, -0.003)
    >>> list(data.frame.columns)
    ['village', 'soil', 'plot_ha', 'height_m', 'irrigation_hours', 'maize_yield']
    """
    n = _check_size("n", n, IRRIGATION_N_VILLAGES)
    frame = _irrigation_frame(n, np.random.default_rng(seed))
    truth = _truth(IRRIGATION_BETA, IRRIGATION_DIRECT, IRRIGATION_FIRST_STAGE)
    roles = {
        "outcome": "maize_yield",
        "treatments": ("irrigation_hours",),
        "instruments": ("height_m",),
        "controls": ("plot_ha", "soil"),
        "cluster": "village",
    }
    return DemoData("irrigation", frame, truth, _irrigation_description(n, truth), roles)


def _irrigation_frame(n: int, rng: np.random.Generator) -> pd.DataFrame:
    """The draws of :func:`irrigation`, in a fixed order (changing it changes every number)."""
    import pandas as pd

    n_villages = IRRIGATION_N_VILLAGES
    # Villages lie along the slope of the district; plots scatter around their village.
    village_height = rng.uniform(3.0, 35.0, size=n_villages)
    village_irrigation_shock = rng.normal(0.0, 15.0, size=n_villages)  # canal management
    village_yield_shock = rng.normal(0.0, 0.15, size=n_villages)  # pests, extension officer
    village = rng.integers(0, n_villages, size=n)

    height = np.maximum(village_height[village] + rng.normal(0.0, 5.0, size=n), 0.2)
    height = np.round(height, CSV_DECIMALS["height_m"])
    soil_code = rng.choice(len(SOIL_LEVELS), size=n, p=SOIL_SHARES)
    plot_ha = np.round(rng.lognormal(mean=0.0, sigma=0.5, size=n), CSV_DECIMALS["plot_ha"])
    plot_ha = np.maximum(plot_ha, 0.05)
    moisture = rng.normal(0.0, 1.0, size=n)  # unobserved

    soil_hours = np.array([-15.0, 0.0, 30.0])[soil_code]  # sand drains, needs more water
    soil_yield = np.array([0.10, 0.30, -0.40])[soil_code]
    hours = (
        250.0
        + IRRIGATION_FIRST_STAGE * height
        - 40.0 * moisture
        + soil_hours
        + 15.0 * np.log(plot_ha)
        + village_irrigation_shock[village]
        + rng.normal(0.0, 35.0, size=n)
    )
    hours = np.round(np.maximum(hours, 0.0), CSV_DECIMALS["irrigation_hours"])
    maize = (
        2.3
        + IRRIGATION_BETA * hours
        + IRRIGATION_DIRECT * height
        + 0.6 * moisture
        + soil_yield
        - 0.15 * np.log(plot_ha)
        + village_yield_shock[village]
        + rng.normal(0.0, 0.6, size=n)
    )
    maize = np.round(np.maximum(maize, 0.0), CSV_DECIMALS["maize_yield"])

    return pd.DataFrame(
        {
            "village": [f"V{v + 1:02d}" for v in village],
            "soil": np.array(SOIL_LEVELS, dtype=object)[soil_code],
            "plot_ha": plot_ha,
            "height_m": height,
            "irrigation_hours": hours,
            "maize_yield": maize,
        }
    )


def _irrigation_description(n: int, truth: dict[str, float]) -> str:
    n_villages = IRRIGATION_N_VILLAGES
    return (
        "INVENTED data: no real district, village or farm. "
        f"{n} maize plots in {n_villages} villages of an invented river district. "
        "Plots lower below the canal intake irrigate more because water is cheaper downhill "
        f"(first stage {IRRIGATION_FIRST_STAGE:g} hours per metre of height), but height "
        "also lowers yield directly through cooler air and faster drainage. "
        f"True effect of irrigation: beta = {IRRIGATION_BETA:g} t/ha per hour; "
        f"true direct effect of height: {IRRIGATION_DIRECT:g} t/ha per metre, so 2SLS that "
        f"assumes no direct effect tends to {truth['naive_iv_limit']:.5g}. "
        "Unobserved soil moisture raises yield and lowers irrigation, so OLS is biased down."
    )


def nudge(n: int = 4000, seed: int = NUDGE_SEED) -> DemoData:
    """Invented randomised text-message nudge to attend a blood-pressure screening.

    Exactly half of the ``n`` patients (``n // 2``) are drawn at random to receive the
    message ``sms``.  Attendance ``screened`` has two-sided non-compliance: 20 % always attend,
    30 % attend only if messaged (compliers), 50 % never attend.  At follow-up

    .. math::

        P(\\text{bp\\_controlled}_i = 1) = p_i + \\beta\\,\\text{screened}_i
            + \\gamma\\,\\text{sms}_i

    with :math:`\\beta = 0.15` for every patient (so the average effect and the complier
    effect coincide), direct effect :math:`\\gamma = 0.02` (the message itself prompts a change
    of diet) and a baseline :math:`p_i` that falls with age and is higher for always-takers and
    lower for never-takers (so comparing screened with unscreened patients is biased).  All
    probabilities stay inside (0.3, 0.8), so the model is exactly additive.  The Wald ratio
    that ignores the direct effect tends to :math:`\\beta + \\gamma / 0.30 \\approx 0.2167`.

    Parameters
    ----------
    n : int
        Number of patients (even numbers split exactly in half).
    seed : int
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    DemoData
        Columns ``age`` (years), ``sms``, ``screened``, ``bp_controlled`` (all 0/1 integers).

    Examples
    --------
    >>> data = nudge(n=400)
    >>> sorted(data.frame["sms"].unique().tolist())
    [0, 1]
    >>> data.truth["beta"], data.truth["direct_effect"]
    (0.15, 0.02)
    """
    import pandas as pd

    n = _check_size("n", n, 4)
    rng = np.random.default_rng(seed)

    age = rng.integers(40, 76, size=n)  # 40..75 years
    sms = np.zeros(n, dtype=np.int64)
    sms[rng.permutation(n)[: n // 2]] = 1

    shares = np.array(list(NUDGE_TYPE_SHARES.values()))
    kind = rng.choice(len(shares), size=n, p=shares)  # 0 always, 1 complier, 2 never
    screened = np.where(kind == 0, 1, np.where(kind == 1, sms, 0)).astype(np.int64)

    type_shift = np.array([0.08, 0.0, -0.06])[kind]  # health-conscious patients attend
    baseline = 0.45 - 0.004 * (age - 57.5) + type_shift
    prob = baseline + NUDGE_BETA * screened + NUDGE_DIRECT * sms
    bp_controlled = (rng.uniform(size=n) < prob).astype(np.int64)

    frame = pd.DataFrame(
        {
            "age": age.astype(np.int64),
            "sms": sms,
            "screened": screened,
            "bp_controlled": bp_controlled,
        }
    )
    truth = _truth(NUDGE_BETA, NUDGE_DIRECT, NUDGE_TYPE_SHARES["complier"])
    roles = {
        "outcome": "bp_controlled",
        "treatments": ("screened",),
        "instruments": ("sms",),
        "controls": ("age",),
        "cluster": None,
    }
    return DemoData("nudge", frame, truth, _nudge_description(n, truth), roles)


def _nudge_description(n: int, truth: dict[str, float]) -> str:
    return (
        "INVENTED data: no real clinic, patient or trial. "
        f"{n} patients of an invented clinic; half, drawn at random, get a text message (sms) "
        "inviting them to a blood-pressure screening. Non-compliance is two-sided: 20% always "
        "attend, 30% attend only if messaged, 50% never attend. "
        f"True effect of screening on P(blood pressure controlled): beta = {NUDGE_BETA:g} "
        f"for everybody; true direct effect of the message (diet): {NUDGE_DIRECT:g}, so the "
        f"Wald ratio that assumes no direct effect tends to {truth['naive_iv_limit']:.4g}."
    )


def published_table() -> dict[str, Any]:
    """Numbers of an invented published table (reported numbers only, no raw data).

    The invented study: 212 districts of an invented country entered a lottery for rural-road
    funds; the lottery win (instrument) raised paved road per 100 km² (treatment, km), and the
    outcome is mean household consumption in percent (100 × log points).  Road funds might
    also have paid for other things (the possible direct effect).

    The printed reduced form and first stage are the primitive numbers; the estimate is their
    ratio and its standard error the delta-method value ignoring their covariance,

    .. math::

        \\operatorname{se}(\\hat\\beta) \\approx \\frac{1}{|\\hat\\pi|}
        \\sqrt{\\operatorname{se}(\\hat\\rho)^2 + \\hat\\beta^2 \\operatorname{se}(\\hat\\pi)^2},

    each rounded to three decimals as a journal would print them.

    Returns
    -------
    dict
        ``estimate``, ``se``, ``first_stage``, ``first_stage_se``, ``reduced_form``,
        ``reduced_form_se`` (floats), ``n`` (int), plus ``invented`` (True) and
        ``description`` (str).

    Examples
    --------
    >>> table = published_table()
    >>> table["estimate"], table["se"], table["n"]
    (0.75, 0.25, 212)
    """
    reduced_form, reduced_form_se = 3.15, 0.95  # percent of consumption
    first_stage, first_stage_se = 4.2, 0.6  # km of paved road per 100 km^2
    estimate = reduced_form / first_stage
    se = math.hypot(reduced_form_se, estimate * first_stage_se) / abs(first_stage)
    return {
        "estimate": round(estimate, 3),
        "se": round(se, 3),
        "first_stage": first_stage,
        "first_stage_se": first_stage_se,
        "reduced_form": reduced_form,
        "reduced_form_se": reduced_form_se,
        "n": 212,
        "invented": True,
        "description": (
            "INVENTED published table: no real study, country or article. 212 districts "
            "entered a lottery for rural-road funds; winning raised paved road by 4.2 km per "
            "100 km2 (first stage) and household consumption by 3.15 percent (reduced form), "
            "so the 2SLS estimate is 0.75 percent per km. The road funds may also have paid "
            "for other things, a possible direct effect of the lottery."
        ),
    }


def _truth(beta: float, direct: float, first_stage: float) -> dict[str, float]:
    return {
        "beta": beta,
        "direct_effect": direct,
        "first_stage": first_stage,
        "naive_iv_limit": beta + direct / first_stage,
    }


def _check_size(name: str, value: int, minimum: int) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise ValueError(f"{name} must be an integer of at least {minimum}, got {value!r}")
    return value

