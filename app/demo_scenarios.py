"""Invented scenarios for the demo, generated on the fly from a fixed seed.

Nothing here was measured: the turbines, their sensors and the enzyme assay are made up, with
relationships chosen to look plausible and to give nested cross-validation something to find.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import brentq
from scipy.special import expit

N_TURBINES, N_MONTHS = 60, 24
FAULT_PREVALENCE = 0.15
N_ASSAY_RUNS = 600


@dataclass(frozen=True)
class Scenario:
    """One invented data set: features, target and, when rows come in groups, the group labels."""

    name: str
    description: str
    X: pd.DataFrame
    y: pd.Series
    groups: pd.Series | None


def turbine_fleet(*, seed: int = 7) -> Scenario:
    """An invented wind-turbine fleet: monthly sensor summaries and a gearbox fault in the next 30 days.

    60 turbines with up to 24 monthly rows each (about 3% of months lost to sensor outages, so about
    1,400 rows). A hidden gearbox condition per turbine, slowly worsening, drives the sensor readings;
    the fault follows a nonlinear logistic model of the readings plus a per-turbine random effect and
    row noise, with the intercept set so that about 15% of rows are positive. Rows are ordered by
    turbine, then month; ``groups`` holds the turbine id.
    """
    rng = np.random.default_rng(seed)
    shape = (N_TURBINES, N_MONTHS)
    months = np.arange(N_MONTHS)
    first_age = rng.uniform(1.0, 16.0, N_TURBINES)
    site_warmth = rng.normal(0.0, 2.5, N_TURBINES)
    hidden_wear = rng.normal(0.0, 1.0, N_TURBINES)
    wear_rate = rng.gamma(2.0, 0.025, N_TURBINES)
    frailty = rng.normal(0.0, 0.8, N_TURBINES)  # what makes one turbine fail more than its readings say

    winter = np.cos(2 * np.pi * months / 12)  # +1 in January, the first month
    age = first_age[:, None] + months / 12
    ambient = 9.0 - 8.0 * winter + site_warmth[:, None] + rng.normal(0.0, 1.5, shape)
    high_wind = rng.gamma(3.0, (60.0 + 40.0 * winter) / 3.0, shape)
    condition = (hidden_wear[:, None] + wear_rate[:, None] * months + 0.04 * age
                 + rng.normal(0.0, 0.35, shape))
    # One extra month before the first, so that the first row has a monthly rise too.
    oil = (55.0 + 0.45 * np.c_[ambient[:, :1], ambient] + 0.03 * np.c_[high_wind[:, :1], high_wind]
           + 2.2 * np.c_[condition[:, :1] - 0.1, condition]
           + rng.normal(0.0, 1.0, (N_TURBINES, N_MONTHS + 1)))
    oil_rise = np.diff(oil, axis=1)
    oil = oil[:, 1:]
    vibration = (2.0 + 0.6 * _softplus(condition) + 0.03 * age) * rng.lognormal(0.0, 0.12, shape)
    bearing_spread = 2.5 + 1.3 * _softplus(condition) + rng.gamma(2.0, 0.5, shape)
    power_deficit = np.clip(1.0 + 1.5 * _softplus(condition - 0.5) + rng.normal(0.0, 0.8, shape), 0.0, None)

    risk = (1.2 * _softplus(2.0 * (oil_rise - 1.5)) / 2.0
            + 0.35 * (vibration - 2.5) * (1.0 + age / 10.0)
            + 0.12 * np.clip(bearing_spread - 5.0, 0.0, None) ** 2
            + 0.25 * power_deficit + 0.008 * high_wind
            + frailty[:, None] + rng.normal(0.0, 0.5, shape))
    intercept = brentq(lambda b: expit(b + risk).mean() - FAULT_PREVALENCE, -50.0, 50.0)
    fault = rng.random(shape) < expit(intercept + risk)

    kept = (rng.random(shape) >= 0.03).ravel()
    X = pd.DataFrame({
        "gearbox_oil_temp_c": oil.ravel(),
        "oil_temp_rise_c": oil_rise.ravel(),
        "vibration_rms_mm_s": vibration.ravel(),
        "bearing_temp_spread_c": bearing_spread.ravel(),
        "power_curve_deficit_pct": power_deficit.ravel(),
        "hours_high_wind": high_wind.ravel(),
        "turbine_age_years": age.ravel(),
        "ambient_temp_c": ambient.ravel(),
    })[kept].reset_index(drop=True)
    turbine_ids = np.array([f"WT{t:02d}" for t in range(1, N_TURBINES + 1)])
    return Scenario(
        name="turbine-fleet (invented)",
        description="An invented fleet of 60 wind turbines with monthly sensor summaries, labelled with "
                    "whether the gearbox faulted within the next 30 days; synthetic, not measured.",
        X=X,
        y=pd.Series(fault.ravel()[kept].astype(int), name="gearbox_fault_30d"),
        groups=pd.Series(np.repeat(turbine_ids, N_MONTHS)[kept], name="turbine"),
    )


def assay_yield(*, seed: int = 11) -> Scenario:
    """An invented enzyme assay: reaction yield (%) from temperature, pH, substrate and incubation time.

    Warmer runs react faster (doubling about every 10 °C) but the enzyme denatures above about 50 °C;
    activity peaks at a pH optimum that drifts with temperature; substrate saturates in the
    Michaelis–Menten way; yield approaches 100% as the reaction runs, plus measurement noise.
    """
    rng = np.random.default_rng(seed)
    n = N_ASSAY_RUNS
    temperature = rng.uniform(20.0, 65.0, n)
    ph = rng.uniform(5.0, 9.5, n)
    substrate = np.exp(rng.uniform(np.log(0.5), np.log(50.0), n))
    minutes = rng.uniform(10.0, 240.0, n)

    ph_optimum = 7.2 - 0.02 * (temperature - 37.0)
    activity = np.exp(0.07 * (temperature - 37.0)) * np.exp(-0.5 * ((ph - ph_optimum) / 0.9) ** 2)
    denaturation = 0.003 * np.exp((temperature - 50.0) / 4.0)  # per minute
    active_minutes = -np.expm1(-denaturation * minutes) / denaturation
    rate = 0.015 * activity * substrate / (5.0 + substrate)
    percent = 100.0 * -np.expm1(-rate * active_minutes) + rng.normal(0.0, 3.0, n)

    X = pd.DataFrame({"temperature_c": temperature, "ph": ph, "substrate_mm": substrate,
                      "incubation_min": minutes})
    return Scenario(
        name="assay-yield (invented)",
        description="An invented enzyme assay whose yield depends on temperature, pH, substrate "
                    "concentration and incubation time; synthetic, not measured.",
        X=X,
        y=pd.Series(np.clip(percent, 0.0, 100.0), name="yield_pct"),
        groups=None,
    )


def _softplus(values: np.ndarray) -> np.ndarray:
    return np.logaddexp(0.0, values)
