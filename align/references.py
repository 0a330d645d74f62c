"""The bibliography, kept once: docstrings cite these keys and reports print the entries.

Each result lists the keys of the methods it used (``references``); the report prints
:func:`cite` of each. Every DOI here was checked against the publisher's record.
"""

from __future__ import annotations

#: Key -> the full reference, with its DOI.
REFERENCES = {
    "andersen2006": "Andersen, K. K. et al. (2006): The Greenland Ice Core Chronology 2005, "
    "15-42 ka. Part 1: constructing the time scale. Quat. Sci. Rev. 25, 3246-3257. "
    "doi:10.1016/j.quascirev.2006.08.002",
    "mudelsee2000": "Mudelsee, M. (2000): Ramp function regression: a tool for quantifying "
    "climate transitions. Computers & Geosciences 26, 293-307. "
    "doi:10.1016/S0098-3004(99)00141-7",
    "mudelsee2002": "Mudelsee, M. (2002): TAUEST: a computer program for estimating "
    "persistence in unevenly spaced weather/climate time series. Computers & Geosciences 28, "
    "69-72. doi:10.1016/S0098-3004(01)00041-3",
    "mudelsee2010": "Mudelsee, M. (2010): Climate Time Series Analysis: Classical "
    "Statistical and Bootstrap Methods. Springer, Dordrecht. doi:10.1007/978-90-481-9482-7",
    "erhardt2019": "Erhardt, T. et al. (2019): Decadal-scale progression of the onset of "
    "Dansgaard-Oeschger warming events. Clim. Past 15, 811-825. doi:10.5194/cp-15-811-2019",
    "divine2012": "Divine, D. V. et al. (2012): Tephra-based age models and the uncertainty "
    "between tie points. Clim. Past Discuss. 8, 1529-1566. doi:10.5194/cpd-8-1529-2012",
    "heaton2013": "Heaton, T. J. et al. (2013): Tie-point based age models with Gaussian "
    "processes. Radiocarbon 55(4), 1975-1997. doi:10.2458/azu_js_rc.55.17777",
    "efron1993": "Efron, B. and Tibshirani, R. J. (1993): An Introduction to the Bootstrap. "
    "Chapman & Hall. doi:10.1201/9780429246593",
    "dersimonian1986": "DerSimonian, R. and Laird, N. (1986): Meta-analysis in clinical "
    "trials. Controlled Clinical Trials 7, 177-188. doi:10.1016/0197-2456(86)90046-2",
    "ward1978": "Ward, G. K. and Wilson, S. R. (1978): Procedures for comparing and combining "
    "radiocarbon age determinations: a critique. Archaeometry 20, 19-31. "
    "doi:10.1111/j.1475-4754.1978.tb00208.x",
    "viechtbauer2007": "Viechtbauer, W. (2007): Confidence intervals for the amount of "
    "heterogeneity in meta-analysis. Statistics in Medicine 26, 37-52. doi:10.1002/sim.2514",
    "christen1994": "Christen, J. A. (1994): Summarizing a set of radiocarbon determinations: "
    "a robust approach. Applied Statistics 43, 489-503. doi:10.2307/2986273",
    "ebisuzaki1997": "Ebisuzaki, W. (1997): A method to estimate the statistical significance "
    "of a correlation when the data are serially correlated. J. Climate 10, 2147-2153.",
    "bretherton1999": "Bretherton, C. S. et al. (1999): The effective number of spatial degrees "
    "of freedom of a time-varying field. J. Climate 12, 1990-2009 (from memory).",
    "rehfeld2011": "Rehfeld, K., Marwan, N., Heitzig, J. and Kurths, J. (2011): Comparison of "
    "correlation analysis techniques for irregularly sampled time series. Nonlin. Processes "
    "Geophys. 18, 389-404. doi:10.5194/npg-18-389-2011",
    "cochran1954": "Cochran, W. G. (1954): The combination of estimates from different "
    "experiments. Biometrics 10, 101-129. doi:10.2307/3001666",
    "higgins2009": "Higgins, J. P. T., Thompson, S. G. and Spiegelhalter, D. J. (2009): A "
    "re-evaluation of random-effects meta-analysis. J. R. Stat. Soc. A 172, 137-159. "
    "doi:10.1111/j.1467-985X.2008.00552.x",
}


def cite(key):
    """The full reference of ``key``."""
    return REFERENCES[key]
