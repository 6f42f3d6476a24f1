"""The published sources debrief cites, one keyed list for code, tests, docs and the report.

Code, tests and docs cite a source by its key in square brackets, ``[Saba2010]``; module
docstrings list theirs in numpydoc form, ``.. [Saba2010] what the module takes from it``, and the
report's "Methods and sources" section prints the full citation from :data:`REFERENCES`, so one
paper has one citation everywhere. A citation whose details (title, volume, pages) were written
from memory, not checked against the publication, says "from memory". ``docs/references.md`` is
generated from this list (``python -m debrief.references > docs/references.md``); a test keeps
it current and checks that every key cited in the repository is here.
"""

from __future__ import annotations

import re
from types import MappingProxyType

#: key -> full citation, in key order. Read-only.
REFERENCES = MappingProxyType({
    "Ballarotti2005": "Ballarotti, M. G., Saba, M. M. F. and Pinto Jr., O. (2005). High-speed camera "
                      "observations of negative ground flashes on a millisecond-scale. Geophys. Res. Lett. 32, "
                      "L23802 (from memory).",
    "BarShalom2001": "Bar-Shalom, Y., Li, X. R. and Kirubarajan, T. (2001). Estimation with Applications to "
                     "Tracking and Navigation. Wiley (combining independent Gaussian estimates by "
                     "inverse-covariance weighting; from memory).",
    "Biagi2007": "Biagi, C. J., Cummins, K. L., Kehoe, K. E. and Krider, E. P. (2007). National Lightning "
                 "Detection Network (NLDN) performance in southern Arizona, Texas, and Oklahoma in 2003-2004. "
                 "J. Geophys. Res. 112, D05208 (from memory).",
    "CIGRE549": "CIGRE Technical Brochure 549 (2013). Lightning parameters for engineering applications "
                "(stroke peak-current distributions; values as cited by open-source "
                "line-performance code, from memory).",
    "Cummins1998": "Cummins, K. L., Murphy, M. J., Bardo, E. A., Hiscox, W. L., Pyle, R. B. and Pifer, A. E. "
                   "(1998). A combined TOA/MDF technology upgrade of the U.S. National Lightning Detection "
                   "Network. J. Geophys. Res. 103(D8), 9035-9044.",
    "CumminsMurphy2009": "Cummins, K. L. and Murphy, M. J. (2009). An overview of lightning locating systems: "
                         "history, techniques, and data uses, with an in-depth look at the U.S. NLDN. IEEE "
                         "Trans. Electromagn. Compat. 51(3), 499-518 (from memory).",
    "Eriksson1987": "Eriksson, A. J. (1987). The incidence of lightning strikes to power lines. IEEE Trans. "
                    "Power Delivery PWRD-2(3), 859-870 (attractive radius Ra = 0.67 h^0.6 I^0.74 and line "
                    "incidence N = Ng (28 h^0.6 + b)/10; from memory).",
    "Garwood1936": "Garwood, F. (1936). Fiducial limits for the Poisson distribution. Biometrika 28, 437-442 "
                   "(exact Poisson confidence limits; from memory).",
    "Hanley1983": "Hanley, J. A. and Lippman-Hand, A. (1983). If nothing goes wrong, is everything all right? "
                  "Interpreting zero numerators. JAMA 249(13), 1743-1745 (the rule of three; from memory).",
    "Holle1999": "Holle, R. L., L\u00f3pez, R. E. and Zimmermann, C. (1999). Updated recommendations for "
                 "lightning safety - 1998. Bull. Amer. Meteor. Soc. 80(10), 2035-2041.",
    "IEEE1243": "IEEE Std 1243-1997. IEEE Guide for Improving the Lightning Performance of Transmission Lines. "
                "IEEE (from memory).",
    "IEEE1410": "IEEE Std 1410-2010. IEEE Guide for Improving the Lightning Performance of Electric Power "
                "Overhead Distribution Lines. IEEE (from memory).",
    "ISO8601": "ISO 8601-1:2019. Date and time - Representations for information interchange - Part 1: Basic "
               "rules. ISO.",
    "Johnson1994": "Johnson, N. L., Kotz, S. and Balakrishnan, N. (1994). Continuous Univariate "
                   "Distributions, Vol. 1, 2nd ed. Wiley (chi-square distribution).",
    "Karney2013": "Karney, C. F. F. (2013). Algorithms for geodesics. J. Geodesy 87(1), 43-55, "
                  "doi:10.1007/s00190-012-0578-z.",
    "Kitagawa1962": "Kitagawa, N., Brook, M. and Workman, E. J. (1962). Continuing currents in cloud-to-ground "
                    "lightning discharges. J. Geophys. Res. 67(2), 637-647 (from memory).",
    "Okabe2008": "Okabe, M. and Ito, K. (2008). Color Universal Design (CUD): how to make figures and "
                 "presentations that are friendly to colorblind people (from memory).",
    "Owen1956": "Owen, D. B. (1956). Tables for computing bivariate normal probabilities. Ann. Math. "
                "Statist. 27(4), 1075-1090.",
    "POSIX2017": "IEEE Std 1003.1-2017 (POSIX). Base Definitions, section 4.16: Seconds Since the Epoch. IEEE "
                 "and The Open Group.",
    "Poelman2021": "Poelman, D. R., Schulz, W., Pedeboy, S., Hill, D., Saba, M., Hunt, H., Schwalt, L., "
                   "Vergeiner, C., Mata, C. T., Schumann, C. and Warner, T. (2021). Global ground strike point "
                   "characteristics in negative downward lightning flashes - Part 1: Observations. Nat. "
                   "Hazards Earth Syst. Sci. 21, 1909-1919.",
    "RFC7946": "Butler, H., Daly, M., Doyle, A., Gillies, S., Hagen, S. and Schaub, T. (2016). The GeoJSON "
               "Format. IETF RFC 7946 (authors from memory).",
    "Rakov1990": "Rakov, V. A. and Uman, M. A. (1990). Some properties of negative cloud-to-ground lightning "
                 "flashes versus stroke order. J. Geophys. Res. 95(D5), 5447-5453 (from memory).",
    "Rakov2003": "Rakov, V. A. and Uman, M. A. (2003). Lightning: Physics and Effects. Cambridge University "
                 "Press.",
    "Rusck1958": "Rusck, S. (1958). Induced lightning over-voltages on power-transmission lines with special "
                 "reference to the over-voltage protection of low-voltage networks. Trans. Royal Inst. "
                 "Technology, Stockholm, No. 120 (from memory).",
    "Saba2006": "Saba, M. M. F., Pinto Jr., O. and Ballarotti, M. G. (2006). Relation between lightning return "
                "stroke peak current and following continuing current. Geophys. Res. Lett. 33, L23807 "
                "(from memory).",
    "Saba2010": "Saba, M. M. F., Schulz, W., Warner, T. A., Campos, L. Z. S., Schumann, C., Krider, E. P., "
                "Cummins, K. L. and Orville, R. E. (2010). High-speed video observations of positive lightning "
                "flashes to ground. J. Geophys. Res. 115, D24201, doi:10.1029/2010JD014330 (title and authors "
                "from memory; the DOI is confirmed).",
    "Snyder1987": "Snyder, J. P. (1987). Map Projections: A Working Manual. U.S. Geological Survey "
                  "Professional Paper 1395.",
    "Thottappillil1992": "Thottappillil, R., Rakov, V. A., Uman, M. A., Beasley, W. H., Master, M. J. and "
                         "Shelukhin, D. V. (1992). Lightning subsequent-stroke electric field peak greater than "
                         "the first stroke peak and multiple ground terminations. J. Geophys. Res. 97(D7), "
                         "7503-7509.",
    "Vincenty1975": "Vincenty, T. (1975). Direct and inverse solutions of geodesics on the ellipsoid with "
                    "application of nested equations. Survey Review 23(176), 88-93 (from memory).",
})

#: What a citation key looks like where it is cited: ``[Saba2010]``, ``[IEEE1410]``, ``[CIGRE549]``;
#: a letter follows the year when one first author has two sources in a year.
KEY_PATTERN = re.compile(r"\[([A-Z][A-Za-z]*\d{3,4}[a-z]?)\]")


def cite(*keys: str) -> str:
    """The full citations of `keys`, each as ``[Key] citation``, joined by a space.

    Raises ``KeyError`` naming the key when a key is not in :data:`REFERENCES`.
    """
    missing = [k for k in keys if k not in REFERENCES]
    if missing:
        raise KeyError(f"no reference with key {', '.join(missing)} in debrief.references")
    return " ".join(f"[{k}] {REFERENCES[k]}" for k in keys)  # each citation ends with a full stop


def markdown() -> str:
    """The list as Markdown, one ``- **[Key]** citation`` line per source (docs/references.md)."""
    return "".join(f"- **[{k}]** {v}\n" for k, v in sorted(REFERENCES.items(), key=lambda kv: kv[0].lower()))


def document() -> str:
    """The whole of docs/references.md."""
    return ("# References\n\n"
            "Every published source that debrief's code, tests, docs and report cite, by key. Generated\n"
            "from `debrief/references.py` (`python -m debrief.references > docs/references.md`); a test\n"
            "keeps it current. \"From memory\" marks details not checked against the publication.\n\n"
            + markdown())


if __name__ == "__main__":  # python -m debrief.references > docs/references.md
    print(document(), end="")
