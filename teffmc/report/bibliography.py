"""BibTeX entries of the methods and libraries a run used (``references.bib``).

Every entry below was written FROM MEMORY (authors, journal, volume, first page, year),
not copied from the publishers' records: check them before submitting a paper. Only
works whose reference we are sure of are listed; libraries without a paper we are sure
of (miepython, speclite) are cited as software with their version and repository.
"""

__all__ = ["ENTRIES", "bibtex", "short_cite"]

# key -> (short citation for plain text, BibTeX entry); all from memory (see above)
ENTRIES = {
    "ForemanMackey2013": ("Foreman-Mackey et al. 2013", """@article{ForemanMackey2013,
  author = {{Foreman-Mackey}, Daniel and Hogg, David W. and Lang, Dustin and Goodman, Jonathan},
  title = {emcee: The MCMC Hammer},
  journal = {Publications of the Astronomical Society of the Pacific},
  year = {2013}, volume = {125}, number = {925}, pages = {306},
  doi = {10.1086/670067}
}"""),
    "Goodman2010": ("Goodman & Weare 2010", """@article{Goodman2010,
  author = {Goodman, Jonathan and Weare, Jonathan},
  title = {Ensemble samplers with affine invariance},
  journal = {Communications in Applied Mathematics and Computational Science},
  year = {2010}, volume = {5}, number = {1}, pages = {65--80},
  doi = {10.2140/camcos.2010.5.65}
}"""),
    "terBraak2006": ("ter Braak 2006", """@article{terBraak2006,
  author = {ter Braak, Cajo J. F.},
  title = {A Markov Chain Monte Carlo version of the genetic algorithm Differential
           Evolution: easy Bayesian computing for real parameter spaces},
  journal = {Statistics and Computing},
  year = {2006}, volume = {16}, number = {3}, pages = {239--249},
  doi = {10.1007/s11222-006-8769-1}
}"""),
    "MadrasSokal1988": ("Madras & Sokal 1988", """@article{MadrasSokal1988,
  author = {Madras, Neal and Sokal, Alan D.},
  title = {The Pivot Algorithm: A Highly Efficient {Monte Carlo} Method for the
           Self-Avoiding Walk},
  journal = {Journal of Statistical Physics},
  year = {1988}, volume = {50}, pages = {109--186}
}"""),
    "Vehtari2021": ("Vehtari et al. 2021", """@article{Vehtari2021,
  author = {Vehtari, Aki and Gelman, Andrew and Simpson, Daniel and Carpenter, Bob and
            B{\\"u}rkner, Paul-Christian},
  title = {Rank-Normalization, Folding, and Localization: An Improved $\\widehat{R}$ for
           Assessing Convergence of MCMC},
  journal = {Bayesian Analysis},
  year = {2021}, volume = {16}, number = {2}, pages = {667--718},
  doi = {10.1214/20-BA1221}
}"""),
    "Vehtari2017": ("Vehtari, Gelman & Gabry 2017", """@article{Vehtari2017,
  author = {Vehtari, Aki and Gelman, Andrew and Gabry, Jonah},
  title = {Practical Bayesian model evaluation using leave-one-out cross-validation and WAIC},
  journal = {Statistics and Computing},
  year = {2017}, volume = {27}, number = {5}, pages = {1413--1432},
  doi = {10.1007/s11222-016-9696-4}
}"""),
    "Burkner2021": ("Bürkner, Gabry & Vehtari 2021", """@article{Burkner2021,
  author = {B{\\"u}rkner, Paul-Christian and Gabry, Jonah and Vehtari, Aki},
  title = {Efficient leave-one-out cross-validation for Bayesian non-factorized normal and
           Student-t models},
  journal = {Computational Statistics},
  year = {2021}, volume = {36}, pages = {1243--1261}
}"""),
    "Yao2018": ("Yao et al. 2018", """@article{Yao2018,
  author = {Yao, Yuling and Vehtari, Aki and Simpson, Daniel and Gelman, Andrew},
  title = {Using Stacking to Average Bayesian Predictive Distributions},
  journal = {Bayesian Analysis},
  year = {2018}, volume = {13}, number = {3}, pages = {917--1007},
  doi = {10.1214/17-BA1091}
}"""),
    "Kumar2019": ("Kumar et al. 2019", """@article{Kumar2019,
  author = {Kumar, Ravin and Carroll, Colin and Hartikainen, Ari and Martin, Osvaldo},
  title = {ArviZ a unified library for exploratory analysis of Bayesian models in Python},
  journal = {Journal of Open Source Software},
  year = {2019}, volume = {4}, number = {33}, pages = {1143},
  doi = {10.21105/joss.01143}
}"""),
    "Astropy2013": ("Astropy Collaboration 2013", """@article{Astropy2013,
  author = {{Astropy Collaboration}},
  title = {Astropy: A community Python package for astronomy},
  journal = {Astronomy \\& Astrophysics},
  year = {2013}, volume = {558}, pages = {A33},
  doi = {10.1051/0004-6361/201322068}
}"""),
    "Astropy2018": ("Astropy Collaboration 2018", """@article{Astropy2018,
  author = {{Astropy Collaboration}},
  title = {The Astropy Project: Building an Open-science Project and Status of the v2.0 Core
           Package},
  journal = {The Astronomical Journal},
  year = {2018}, volume = {156}, number = {3}, pages = {123},
  doi = {10.3847/1538-3881/aabc4f}
}"""),
    "Astropy2022": ("Astropy Collaboration 2022", """@article{Astropy2022,
  author = {{Astropy Collaboration}},
  title = {The Astropy Project: Sustaining and Growing a Community-oriented Open-source
           Project and the Latest Major Release (v5.0) of the Core Package},
  journal = {The Astrophysical Journal},
  year = {2022}, volume = {935}, number = {2}, pages = {167},
  doi = {10.3847/1538-4357/ac7c74}
}"""),
    "Harris2020": ("Harris et al. 2020", """@article{Harris2020,
  author = {Harris, Charles R. and others},
  title = {Array programming with {NumPy}},
  journal = {Nature},
  year = {2020}, volume = {585}, pages = {357--362},
  doi = {10.1038/s41586-020-2649-2}
}"""),
    "Virtanen2020": ("Virtanen et al. 2020", """@article{Virtanen2020,
  author = {Virtanen, Pauli and others},
  title = {{SciPy} 1.0: Fundamental Algorithms for Scientific Computing in Python},
  journal = {Nature Methods},
  year = {2020}, volume = {17}, pages = {261--272},
  doi = {10.1038/s41592-019-0686-2}
}"""),
    "Hunter2007": ("Hunter 2007", """@article{Hunter2007,
  author = {Hunter, John D.},
  title = {Matplotlib: A 2D Graphics Environment},
  journal = {Computing in Science \\& Engineering},
  year = {2007}, volume = {9}, number = {3}, pages = {90--95},
  doi = {10.1109/MCSE.2007.55}
}"""),
    "Speagle2020": ("Speagle 2020", """@article{Speagle2020,
  author = {Speagle, Joshua S.},
  title = {dynesty: a dynamic nested sampling package for estimating Bayesian posteriors
           and evidences},
  journal = {Monthly Notices of the Royal Astronomical Society},
  year = {2020}, volume = {493}, number = {3}, pages = {3132--3158},
  doi = {10.1093/mnras/staa278}
}"""),
    "Skilling2006": ("Skilling 2006", """@article{Skilling2006,
  author = {Skilling, John},
  title = {Nested sampling for general Bayesian computation},
  journal = {Bayesian Analysis},
  year = {2006}, volume = {1}, number = {4}, pages = {833--859},
  doi = {10.1214/06-BA127}
}"""),
    "Gordon2024": ("Gordon 2024", """@article{Gordon2024,
  author = {Gordon, Karl D.},
  title = {dust\\_extinction: Interstellar Dust Extinction Models},
  journal = {Journal of Open Source Software},
  year = {2024}, volume = {9}, number = {100}, pages = {7023},
  doi = {10.21105/joss.07023}
}"""),
    "Cardelli1989": ("Cardelli, Clayton & Mathis 1989", """@article{Cardelli1989,
  author = {Cardelli, Jason A. and Clayton, Geoffrey C. and Mathis, John S.},
  title = {The Relationship between Infrared, Optical, and Ultraviolet Extinction},
  journal = {The Astrophysical Journal},
  year = {1989}, volume = {345}, pages = {245},
  doi = {10.1086/167900}
}"""),
    "ODonnell1994": ("O'Donnell 1994", """@article{ODonnell1994,
  author = {O'Donnell, James E.},
  title = {R-dependent Optical and Near-Ultraviolet Extinction},
  journal = {The Astrophysical Journal},
  year = {1994}, volume = {422}, pages = {158}
}"""),
    "Fitzpatrick1999": ("Fitzpatrick 1999", """@article{Fitzpatrick1999,
  author = {Fitzpatrick, Edward L.},
  title = {Correcting for the Effects of Interstellar Extinction},
  journal = {Publications of the Astronomical Society of the Pacific},
  year = {1999}, volume = {111}, pages = {63}
}"""),
    "Fitzpatrick2004": ("Fitzpatrick 2004", """@inproceedings{Fitzpatrick2004,
  author = {Fitzpatrick, Edward L.},
  title = {Interstellar Extinction in the Milky Way Galaxy},
  booktitle = {Astrophysics of Dust},
  series = {ASP Conference Series},
  year = {2004}, volume = {309}, pages = {33}
}"""),
    "Fitzpatrick2019": ("Fitzpatrick et al. 2019", """@article{Fitzpatrick2019,
  author = {Fitzpatrick, Edward L. and others},
  title = {An Analysis of the Shapes of Interstellar Extinction Curves. VII. Milky Way
           Spectrophotometric Optical-through-ultraviolet Extinction and Its R-dependence},
  journal = {The Astrophysical Journal},
  year = {2019}, volume = {886}, pages = {108}
}"""),
    "Gordon2023": ("Gordon et al. 2023", """@article{Gordon2023,
  author = {Gordon, Karl D. and others},
  title = {One Relation for All Wavelengths: The Far-ultraviolet to Mid-infrared Milky
           Way Spectroscopic R(V)-dependent Dust Extinction Relationship},
  journal = {The Astrophysical Journal},
  year = {2023}, volume = {950}, number = {2}, pages = {86}
}"""),
    "miepython": ("Prahl, miepython", """@software{miepython,
  author = {Prahl, Scott},
  title = {miepython: Mie scattering of light by perfect spheres},
  url = {https://github.com/scottprahl/miepython},
  version = {VERSION}
}"""),
    "speclite": ("speclite", """@software{speclite,
  author = {Kirkby, David and others},
  title = {speclite: lightweight utilities for working with spectroscopic data},
  url = {https://github.com/desihub/speclite},
  version = {VERSION}
}"""),
}

#: extinction law name (teffmc.dust.extinction.LAWS) -> key
LAW_KEYS = {"CCM89": "Cardelli1989", "O94": "ODonnell1994", "F99": "Fitzpatrick1999",
            "F04": "Fitzpatrick2004", "F19": "Fitzpatrick2019", "G23": "Gordon2023"}
#: library -> keys cited for it
LIBRARY_KEYS = {"emcee": ["ForemanMackey2013"], "arviz": ["Kumar2019"],
                "astropy": ["Astropy2013", "Astropy2018", "Astropy2022"],
                "numpy": ["Harris2020"], "scipy": ["Virtanen2020"],
                "matplotlib": ["Hunter2007"], "dust_extinction": ["Gordon2024"],
                "miepython": ["miepython"], "speclite": ["speclite"],
                "dynesty": ["Speagle2020"]}


def short_cite(key):
    """Plain-text citation of a key ("Foreman-Mackey et al. 2013")."""
    return ENTRIES[key][0]


def bibtex(keys, versions=None):
    """Return the BibTeX file text for ``keys`` (in that order, each once).

    Software entries get the run's ``versions`` of their package.
    """
    versions = versions or {}
    out = ["% references.bib written by teffmc for the methods paragraph (methods.tex).",
           "% Entries were written from memory, not copied from the publishers' records:",
           "% check authors, titles, volumes and pages before submitting."]
    seen = []
    for k in keys:
        if k in seen:
            continue
        seen.append(k)
        out.append(ENTRIES[k][1].replace("VERSION", str(versions.get(k, "unknown"))))
    return "\n\n".join(out) + "\n"
