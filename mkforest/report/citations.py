"""Published methods a run may rest on, as structured references.

The methods text (mkforest.report.methods) cites them in the text as "Felsenstein
1981" and lists them in full; the archive's CITATION.cff lists the same works
under ``references``. The short forms and their roles are those of
../shared/design/references.md; titles, volumes and pages were recalled from
memory: check them against the journals before a manuscript goes out.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Reference:
    key: str
    authors: tuple  # ((family names, given initials), ...)
    year: int
    title: str
    journal: str = ""
    volume: int | None = None
    pages: tuple | None = None  # (first, last)
    publisher: str = ""
    place: str = ""
    edition: str = ""

    def cite(self) -> str:
        """In-text form: 'Pagel 1994', 'Hurvich & Tsai 1989', 'Byrd et al. 1995'."""
        names = [family for family, _ in self.authors]
        if len(names) == 1:
            who = names[0]
        elif len(names) == 2:
            who = f"{names[0]} & {names[1]}"
        elif len(names) == 3:
            who = f"{names[0]}, {names[1]} & {names[2]}"
        else:
            who = f"{names[0]} et al."
        return f"{who} {self.year}"

    def full(self) -> str:
        """One line of a reference list."""
        names = [f"{family}, {given}" for family, given in self.authors]
        who = names[0] if len(names) == 1 else ", ".join(names[:-1]) + " & " + names[-1]
        if self.journal:
            pages = (
                str(self.pages[0])
                if self.pages[0] == self.pages[1]  # an article number
                else f"{self.pages[0]}–{self.pages[1]}"
            )
            where = f"{self.journal} {self.volume}: {pages}."
        else:
            edition = f"{self.edition} edition. " if self.edition else ""
            where = f"{edition}{self.publisher}, {self.place}."
        return f"{who} ({self.year}) {self.title}. {where}"

    def cff(self) -> dict:
        """The reference as a CITATION.cff 1.2.0 ``references`` entry."""
        entry = {
            "type": "article" if self.journal else "book",
            "authors": [{"family-names": f, "given-names": g} for f, g in self.authors],
            "title": self.title,
            "year": self.year,
        }
        if self.journal:
            entry.update(
                {
                    "journal": self.journal,
                    "volume": self.volume,
                    "start": self.pages[0],
                    "end": self.pages[1],
                }
            )
        else:
            entry["publisher"] = {"name": self.publisher, "city": self.place}
            if self.edition:
                entry["edition"] = self.edition
        return entry


_ALL = [
    Reference(
        "felsenstein1981",
        (("Felsenstein", "J."),),
        1981,
        "Evolutionary trees from DNA sequences: a maximum likelihood approach",
        "Journal of Molecular Evolution",
        17,
        (368, 376),
    ),
    Reference(
        "lewis2001",
        (("Lewis", "P. O."),),
        2001,
        "A likelihood approach to estimating phylogeny from discrete morphological character data",
        "Systematic Biology",
        50,
        (913, 925),
    ),
    Reference(
        "akaike1974",
        (("Akaike", "H."),),
        1974,
        "A new look at the statistical model identification",
        "IEEE Transactions on Automatic Control",
        19,
        (716, 723),
    ),
    Reference(
        "hurvich1989",
        (("Hurvich", "C. M."), ("Tsai", "C.-L.")),
        1989,
        "Regression and time series model selection in small samples",
        "Biometrika",
        76,
        (297, 307),
    ),
    Reference(
        "schwarz1978",
        (("Schwarz", "G."),),
        1978,
        "Estimating the dimension of a model",
        "Annals of Statistics",
        6,
        (461, 464),
    ),
    Reference(
        "burnham2002",
        (("Burnham", "K. P."), ("Anderson", "D. R.")),
        2002,
        "Model Selection and Multimodel Inference: A Practical Information-Theoretic Approach",
        publisher="Springer",
        place="New York",
        edition="2nd",
    ),
    Reference(
        "fitzjohn2009",
        (("FitzJohn", "R. G."), ("Maddison", "W. P."), ("Otto", "S. P.")),
        2009,
        "Estimating trait-dependent speciation and extinction rates from incompletely "
        "resolved phylogenies",
        "Systematic Biology",
        58,
        (595, 611),
    ),
    Reference(
        "byrd1995",
        (("Byrd", "R. H."), ("Lu", "P."), ("Nocedal", "J."), ("Zhu", "C.")),
        1995,
        "A limited memory algorithm for bound constrained optimization",
        "SIAM Journal on Scientific Computing",
        16,
        (1190, 1208),
    ),
    Reference(
        "pagel1994",
        (("Pagel", "M."),),
        1994,
        "Detecting correlated evolution on phylogenies: a general method for the "
        "comparative analysis of discrete characters",
        "Proceedings of the Royal Society of London B",
        255,
        (37, 45),
    ),
    Reference(
        "goldman1993",
        (("Goldman", "N."),),
        1993,
        "Statistical tests of models of DNA substitution",
        "Journal of Molecular Evolution",
        36,
        (182, 198),
    ),
    Reference(
        "self1987",
        (("Self", "S. G."), ("Liang", "K.-Y.")),
        1987,
        "Asymptotic properties of maximum likelihood estimators and likelihood ratio tests "
        "under nonstandard conditions",
        "Journal of the American Statistical Association",
        82,
        (605, 610),
    ),
    Reference(
        "andrews2000",
        (("Andrews", "D. W. K."),),
        2000,
        "Inconsistency of the bootstrap when a parameter is on the boundary of the parameter space",
        "Econometrica",
        68,
        (399, 405),
    ),
    Reference(
        "berger1994",
        (("Berger", "R. L."), ("Boos", "D. D.")),
        1994,
        "P values maximized over a confidence set for the nuisance parameter",
        "Journal of the American Statistical Association",
        89,
        (1012, 1016),
    ),
    Reference(
        "yang1995",
        (("Yang", "Z."), ("Kumar", "S."), ("Nei", "M.")),
        1995,
        "A new method of inference of ancestral nucleotide and amino acid sequences",
        "Genetics",
        141,
        (1641, 1650),
    ),
    Reference(
        "nielsen2002",
        (("Nielsen", "R."),),
        2002,
        "Mapping mutations on phylogenies",
        "Systematic Biology",
        51,
        (729, 739),
    ),
    Reference(
        "huelsenbeck2003",
        (("Huelsenbeck", "J. P."), ("Nielsen", "R."), ("Bollback", "J. P.")),
        2003,
        "Stochastic mapping of morphological characters",
        "Systematic Biology",
        52,
        (131, 158),
    ),
    Reference(
        "beaulieu2013",
        (("Beaulieu", "J. M."), ("O'Meara", "B. C."), ("Donoghue", "M. J.")),
        2013,
        "Identifying hidden rate changes in the evolution of a binary morphological "
        "character: the evolution of plant habit in campanulid angiosperms",
        "Systematic Biology",
        62,
        (725, 737),
    ),
    Reference(
        "tuffley1998",
        (("Tuffley", "C."), ("Steel", "M.")),
        1998,
        "Modeling the covarion hypothesis of nucleotide substitution",
        "Mathematical Biosciences",
        147,
        (63, 91),
    ),
    Reference(
        "galtier2001",
        (("Galtier", "N."),),
        2001,
        "Maximum-likelihood phylogenetic analysis under a covarion-like model",
        "Molecular Biology and Evolution",
        18,
        (866, 873),
    ),
    Reference(
        "maddison2015",
        (("Maddison", "W. P."), ("FitzJohn", "R. G.")),
        2015,
        "The unsolved challenge to phylogenetic correlation tests for categorical characters",
        "Systematic Biology",
        64,
        (127, 136),
    ),
    Reference(
        "boyko2021",
        (("Boyko", "J. D."), ("Beaulieu", "J. M.")),
        2021,
        "Generalized hidden Markov models for phylogenetic comparative datasets",
        "Methods in Ecology and Evolution",
        12,
        (468, 478),
    ),
    Reference(
        "molder2021",
        (
            ("Mölder", "F."),
            ("Jablonski", "K. P."),
            ("Letcher", "B."),
            ("Hall", "M. B."),
            ("Tomkins-Tinch", "C. H."),
            ("Sochat", "V."),
            ("Forster", "J."),
            ("Lee", "S."),
            ("Twardziok", "S. O."),
            ("Kanitz", "A."),
            ("Wilm", "A."),
            ("Holtgrewe", "M."),
            ("Rahmann", "S."),
            ("Nahnsen", "S."),
            ("Köster", "J."),
        ),
        2021,
        "Sustainable data analysis with Snakemake",
        "F1000Research",
        10,
        (33, 33),
    ),
    Reference(
        "pagel1999",
        (("Pagel", "M."),),
        1999,
        "Inferring the historical patterns of biological evolution",
        "Nature",
        401,
        (877, 884),
    ),
    Reference(
        "hoffman2014",
        (("Hoffman", "M. D."), ("Gelman", "A.")),
        2014,
        "The No-U-Turn sampler: adaptively setting path lengths in Hamiltonian Monte Carlo",
        "Journal of Machine Learning Research",
        15,
        (1593, 1623),
    ),
    Reference(
        "vehtari2021",
        (
            ("Vehtari", "A."),
            ("Gelman", "A."),
            ("Simpson", "D."),
            ("Carpenter", "B."),
            ("Bürkner", "P.-C."),
        ),
        2021,
        "Rank-normalization, folding, and localization: an improved R-hat for assessing "
        "convergence of MCMC",
        "Bayesian Analysis",
        16,
        (667, 718),
    ),
    Reference(
        "meng1996",
        (("Meng", "X.-L."), ("Wong", "W. H.")),
        1996,
        "Simulating ratios of normalizing constants via a simple identity: a theoretical "
        "exploration",
        "Statistica Sinica",
        6,
        (831, 860),
    ),
    Reference(
        "gronau2017",
        (
            ("Gronau", "Q. F."),
            ("Sarafoglou", "A."),
            ("Matzke", "D."),
            ("Ly", "A."),
            ("Boehm", "U."),
            ("Marsman", "M."),
            ("Leslie", "D. S."),
            ("Forster", "J. J."),
            ("Wagenmakers", "E.-J."),
            ("Steingroever", "H."),
        ),
        2017,
        "A tutorial on bridge sampling",
        "Journal of Mathematical Psychology",
        81,
        (80, 97),
    ),
    Reference(
        "kass1995",
        (("Kass", "R. E."), ("Raftery", "A. E.")),
        1995,
        "Bayes factors",
        "Journal of the American Statistical Association",
        90,
        (773, 795),
    ),
    Reference(
        "harmon2010",
        (
            ("Harmon", "L. J."),
            ("Losos", "J. B."),
            ("Davies", "T. J."),
            ("Gillespie", "R. G."),
            ("Gittleman", "J. L."),
            ("Jennings", "W. B."),
            ("Kozak", "K. H."),
            ("McPeek", "M. A."),
            ("Moreno-Roark", "F."),
            ("Near", "T. J."),
            ("Purvis", "A."),
            ("Ricklefs", "R. E."),
            ("Schluter", "D."),
            ("Schulte", "J. A."),
            ("Seehausen", "O."),
            ("Sidlauskas", "B. L."),
            ("Torres-Carvajal", "O."),
            ("Weir", "J. T."),
            ("Mooers", "A. Ø."),
        ),
        2010,
        "Early bursts of body size and shape evolution are rare in comparative data",
        "Evolution",
        64,
        (2385, 2396),
    ),
    Reference(
        "mcgraw1992",
        (("McGraw", "K. O."), ("Wong", "S. P.")),
        1992,
        "A common language effect size statistic",
        "Psychological Bulletin",
        111,
        (361, 365),
    ),
    Reference(
        "margush1981",
        (("Margush", "T."), ("McMorris", "F. R.")),
        1981,
        "Consensus n-trees",
        "Bulletin of Mathematical Biology",
        43,
        (239, 244),
    ),
    Reference(
        "benjamini1995",
        (("Benjamini", "Y."), ("Hochberg", "Y.")),
        1995,
        "Controlling the false discovery rate: a practical and powerful approach to "
        "multiple testing",
        "Journal of the Royal Statistical Society B",
        57,
        (289, 300),
    ),
]

REFERENCES = {r.key: r for r in _ALL}


def cite(*keys) -> str:
    """'(Akaike 1974; Hurvich & Tsai 1989)' for the given keys, in the given order."""
    return "(" + "; ".join(REFERENCES[k].cite() for k in keys) + ")"


def cited_in(text: str) -> list:
    """The references whose in-text form occurs in ``text``, sorted by first author and year."""
    found = [r for r in _ALL if r.cite() in text]
    return sorted(found, key=lambda r: (r.authors[0][0].lower(), r.year))
