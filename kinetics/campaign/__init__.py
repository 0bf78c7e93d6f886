"""Campaigns: several runs of one reaction that differ in their design factors.

* :mod:`~kinetics.campaign.design` -- :class:`CampaignRun`, one run and its factors;
* :mod:`~kinetics.campaign.powerlaw` -- the power rate law and its integration;
* :mod:`~kinetics.campaign.globalfit` -- global fits (power law, written mechanism, Arrhenius);
* :mod:`~kinetics.campaign.vtna` -- Variable Time Normalization Analysis;
* :mod:`~kinetics.campaign.rpka` -- Reaction Progress Kinetic Analysis (same / different excess);
* :mod:`~kinetics.campaign.initial_rates` -- initial rates and log-log orders;
* :mod:`~kinetics.campaign.smoothing` -- smoothed courses and their derivatives;
* :mod:`~kinetics.campaign.figures` -- one figure per method;
* :mod:`~kinetics.campaign.config` -- the campaign config, validated once into records;
* :mod:`~kinetics.campaign.runner` -- ``kinetics run CAMPAIGN.toml``: runs as Dask tasks, then the fits;
* :mod:`~kinetics.campaign.demo` -- the invented demo campaign.
"""

from kinetics.campaign.design import CampaignRun, check_campaign, varied_factors
from kinetics.campaign.globalfit import (
    GlobalFitResult,
    compare_power_laws,
    fit_mechanism_campaign,
    fit_power_law,
)
from kinetics.campaign.initial_rates import InitialRate, initial_rate, orders_from_initial_rates
from kinetics.campaign.powerlaw import PowerLaw
from kinetics.campaign.rpka import diagnose, different_excess_order, rate_course, same_excess, same_excess_pairs
from kinetics.campaign.vtna import bootstrap_orders, normalised_time, vtna

__all__ = [
    "CampaignRun", "check_campaign", "varied_factors", "PowerLaw", "GlobalFitResult", "fit_power_law",
    "compare_power_laws", "fit_mechanism_campaign", "vtna", "normalised_time", "bootstrap_orders",
    "rate_course", "same_excess", "same_excess_pairs", "diagnose", "different_excess_order",
    "InitialRate", "initial_rate", "orders_from_initial_rates",
]
