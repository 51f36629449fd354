"""Section figures of a reheat steam turbine: HP, IP and LP efficiency, LP exhaust end point.

The enthalpy-drop method of ASME PTC 6: a section's efficiency is its actual enthalpy drop
divided by the isentropic drop from the same inlet state to the same outlet pressure,

    efficiency = (h_in - h_out) / (h_in - h(p_out, s_in)),

with the inlet taken upstream of the stop or intercept valves so that valve throttling counts
against the section. HP: throttle -> cold reheat. IP: hot reheat -> crossover. LP dry stage
group: crossover -> an LP extraction that is still superheated (when mapped).

The LP exhaust is wet, so its pressure and temperature do not fix its enthalpy. The
expansion-line end point (ELEP) follows from an LP efficiency and the Baumann wetness
correction (``lp_expansion``), or from an energy balance on the generator output
(``energy_balance_ueep``). The used-energy end point (UEEP) adds the exhaust loss, read from a
curve against last-stage annulus velocity (``ExhaustLossCurve``).

Uncertainties are first-order (ISO GUM, ASME PTC 19.1): sensitivity coefficients by central
finite differences of the same vectorised functions, combined root-sum-square
(``propagate_uncertainty``).

The modules: ``reasons`` (reason codes), ``inputs`` (argument shapes, masked steam calls),
``dry`` (superheated sections), ``lp`` (the LP expansion), ``exhaust`` (exhaust loss, UEEP,
energy balance), ``uncertainty`` (propagation), ``lp_chain`` (the LP exhaust chain of one
evaluation: options, cache, figures) and ``frame`` (``evaluate`` over a frame of role
columns). The names this package had as a single module are re-exported here; what the
modules share among themselves (``lp_chain``, the role groups of ``inputs``) is imported
from its module.

Everything here is pure: numpy/pandas in, the same type out, no I/O, no clock, no logging.
Internal units are IAPWS-IF97's: MPa (absolute), K, kJ/kg, kJ/(kg K), m3/kg, kg/s, MW.

References
----------
ASME PTC 6-2004, Steam Turbines (enthalpy-drop efficiency of a turbine section).
IAPWS R7-97(2012), Revised Release on the IAPWS Industrial Formulation 1997.
Spencer, R. C., Cotton, K. C. and Cannon, C. N. (1963), A method for predicting the
performance of steam turbine-generators 16,500 kW and larger, ASME paper 62-WA-209.
JCGM 100:2008 (ISO GUM), Evaluation of measurement data - Guide to the expression of
uncertainty in measurement, section 5 (law of propagation of uncertainty).
ASME PTC 19.1-2013, Test Uncertainty.
"""

from __future__ import annotations

from isentrope.calc.names import FIGURE_FIELDS
from isentrope.calc.sections.dry import (
    SectionExpansion,
    section_efficiency,
    section_expansion,
    stage_group_weight,
)
from isentrope.calc.sections.exhaust import (
    DEFAULT_EXHAUST_LOSS_CURVE,
    DEFAULT_EXHAUST_LOSS_POINTS,
    EXHAUST_LOSS_FACTOR,
    EXHAUST_LOSS_WETNESS_1,
    EXHAUST_LOSS_WETNESS_2,
    ExhaustLossCurve,
    FlowFractions,
    annulus_velocity,
    energy_balance_ueep,
    wetness_corrected_exhaust_loss,
)
from isentrope.calc.sections.frame import (
    ETA_LP_BAND_DEFAULT,
    ETA_LP_DESIGN_DEFAULT,
    FIGURE_UNITS,
    SectionResults,
    evaluate,
)
from isentrope.calc.sections.inputs import (
    P_CRIT,
    ROLE_QUANTITY,
    T_CRIT,
    T_MAX,
)
from isentrope.calc.sections.lp import (
    BAUMANN_DEFAULT,
    BAUMANN_MAX,
    LP_P_MAX,
    LPExpansion,
    lp_expansion,
)
from isentrope.calc.sections.reasons import (
    ENERGY_BALANCE_IMPLAUSIBLE,
    INLET_NOT_SUPERHEATED,
    MISSING_INPUT,
    NO_CONVERGENCE,
    NO_DRY_EFFICIENCY,
    NO_ENTHALPY_DROP,
    NO_EXHAUST_DATA,
    NOT_MAPPED,
    OK,
    OUT_OF_RANGE,
    OUTLET_NOT_SUPERHEATED,
    PRESSURE_NOT_FALLING,
    REASON_GROUPS,
    REASON_TEXT,
    UPSTREAM_INVALID,
    VELOCITY_OUTSIDE_CURVE,
    decode_reason,
    reason_names,
)
from isentrope.calc.sections.uncertainty import (
    DEFAULT_UNCERTAINTY_BY_QUANTITY,
    InstrumentUncertainty,
    default_uncertainties,
    propagate_uncertainty,
)

__all__ = [
    "OK",
    "MISSING_INPUT",
    "OUT_OF_RANGE",
    "PRESSURE_NOT_FALLING",
    "INLET_NOT_SUPERHEATED",
    "OUTLET_NOT_SUPERHEATED",
    "NO_ENTHALPY_DROP",
    "NO_CONVERGENCE",
    "NO_DRY_EFFICIENCY",
    "NOT_MAPPED",
    "NO_EXHAUST_DATA",
    "VELOCITY_OUTSIDE_CURVE",
    "ENERGY_BALANCE_IMPLAUSIBLE",
    "UPSTREAM_INVALID",
    "BAUMANN_DEFAULT",
    "BAUMANN_MAX",
    "DEFAULT_UNCERTAINTY_BY_QUANTITY",
    "LP_P_MAX",
    "T_MAX",
    "P_CRIT",
    "T_CRIT",
    "EXHAUST_LOSS_FACTOR",
    "EXHAUST_LOSS_WETNESS_1",
    "EXHAUST_LOSS_WETNESS_2",
    "ROLE_QUANTITY",
    "FIGURE_FIELDS",
    "DEFAULT_EXHAUST_LOSS_CURVE",
    "DEFAULT_EXHAUST_LOSS_POINTS",
    "ETA_LP_DESIGN_DEFAULT",
    "ETA_LP_BAND_DEFAULT",
    "ExhaustLossCurve",
    "FIGURE_UNITS",
    "FlowFractions",
    "InstrumentUncertainty",
    "LPExpansion",
    "REASON_GROUPS",
    "REASON_TEXT",
    "SectionExpansion",
    "SectionResults",
    "annulus_velocity",
    "decode_reason",
    "default_uncertainties",
    "energy_balance_ueep",
    "evaluate",
    "lp_expansion",
    "propagate_uncertainty",
    "reason_names",
    "section_efficiency",
    "section_expansion",
    "stage_group_weight",
    "wetness_corrected_exhaust_loss",
]
