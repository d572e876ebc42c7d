"""A reusable corpus of bad problem files.

Each entry is ``(name, toml_text, expected)`` where ``expected`` is a list of
substrings that the ProblemError's first line must contain.  The messages are
our own wording (see cubature/problem.py); the corpus pins down that each
mistake is caught and that the offending table / key is named.
"""

GOOD_DOMAIN = """
[domain]
variables = ["x", "y"]
box = [[0, 1], [0, 2]]
"""
GOOD_INTEGRAND = """
[integrand]
expr = "x * y"
"""


def _p(*parts: str) -> str:
    return "\n".join(p.strip("\n") for p in parts) + "\n"


def _with(domain=GOOD_DOMAIN, integrand=GOOD_INTEGRAND, extra=""):
    return _p(domain, integrand, extra) if extra else _p(domain, integrand)


BAD_INPUTS: list[tuple[str, str, list[str]]] = [
    # --- TOML syntax --------------------------------------------------------
    ("toml-unclosed-table", "[domain\nvariables = [\"x\"]\n", ["TOML syntax", ":1:"]),
    ("toml-missing-value", _p(GOOD_DOMAIN, "[integrand]\nexpr =\n"), ["TOML syntax", ":5:"]),
    ("toml-unterminated-string", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x * y\n"), ["TOML syntax", ":5:"]),
    ("toml-duplicate-key", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x\"\nexpr = \"y\"\n"), ["TOML syntax"]),
    ("toml-duplicate-table", _p(GOOD_DOMAIN, GOOD_DOMAIN, GOOD_INTEGRAND), ["TOML syntax"]),
    # --- structure ----------------------------------------------------------
    ("unknown-top-key", _p("titel = \"t\"", GOOD_DOMAIN, GOOD_INTEGRAND), ["titel", "did you mean 'title'", ":1:"]),
    ("unknown-table", _with(extra="[goals]\nrel_tol = 1e-3"), ["goals", "did you mean 'goal'"]),
    ("missing-domain", _p(GOOD_INTEGRAND), ["[domain]", "missing"]),
    ("missing-integrand", _p(GOOD_DOMAIN), ["[integrand]", "missing"]),
    ("domain-not-table", _p("domain = 3", GOOD_INTEGRAND), ["domain", "must be a table"]),
    ("title-not-string", _p("title = 3", GOOD_DOMAIN, GOOD_INTEGRAND), ["title", "string", ":1:"]),
    ("unknown-domain-key", _p(GOOD_DOMAIN, "boxes = 1", GOOD_INTEGRAND), ["[domain] boxes", "did you mean 'box'", ":4:"]),
    ("unknown-integrand-key", _p(GOOD_DOMAIN, "[integrand]\nexprs = \"x\"\n"), ["[integrand] exprs", "did you mean 'expr'"]),
    ("unknown-goal-key", _with(extra="[goal]\nreltol = 1e-3"), ["[goal] reltol", "did you mean 'rel_tol'"]),
    ("unknown-method-key", _with(extra="[method]\nrules = \"genz-malik\""), ["[method] rules", "did you mean 'rule'"]),
    ("unknown-reference-key", _with(extra="[reference]\nvalue = 1\nsauce = \"x\""), ["[reference] sauce", "source"]),
    # --- variables ----------------------------------------------------------
    ("variables-missing", "[domain]\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "missing"]),
    ("variables-empty", "[domain]\nvariables = []\nbox = []\n" + GOOD_INTEGRAND, ["[domain] variables", "empty"]),
    ("variables-not-list", "[domain]\nvariables = \"x\"\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "a string"]),
    ("variables-not-strings", "[domain]\nvariables = [1, 2]\nbox = [[0, 1], [0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "integer"]),
    ("variables-duplicate", "[domain]\nvariables = [\"x\", \"x\"]\nbox = [[0, 1], [0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "twice"]),
    ("variables-underscore", "[domain]\nvariables = [\"_x\"]\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "'_'"]),
    ("variables-function-name", "[domain]\nvariables = [\"exp\"]\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "function"]),
    ("variables-pi", "[domain]\nvariables = [\"pi\"]\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "constant pi"]),
    ("variables-not-identifier", "[domain]\nvariables = [\"x-1\"]\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "not a valid name"]),
    ("variables-keyword", "[domain]\nvariables = [\"lambda\"]\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] variables", "not a valid name"]),
    # --- box ----------------------------------------------------------------
    ("box-and-simplex", "[domain]\nvariables = [\"x\"]\nbox = [[0, 1]]\nsimplex = [[0], [1]]\n" + GOOD_INTEGRAND, ["[domain] simplex", "not both"]),
    ("neither-box-nor-simplex", "[domain]\nvariables = [\"x\"]\n" + GOOD_INTEGRAND, ["[domain]", "box", "simplex"]),
    ("box-row-count", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[0, 1]]\n" + GOOD_INTEGRAND, ["[domain] box", "1 row", "2 variable", ":3:"]),
    ("box-row-shape", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[0, 1], [0, 1, 2]]\n" + GOOD_INTEGRAND, ["[domain] box", "row 2", "[low, high]"]),
    ("box-row-not-list", "[domain]\nvariables = [\"x\"]\nbox = [1]\n" + GOOD_INTEGRAND, ["[domain] box", "row 1"]),
    ("box-not-list", "[domain]\nvariables = [\"x\"]\nbox = 1\n" + GOOD_INTEGRAND, ["[domain] box", "list"]),
    ("box-low-above-high", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[0, 1], [2, 1]]\n" + GOOD_INTEGRAND, ["[domain] box", "row 2", "not below"]),
    ("box-empty-interval", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[0, 1], [1, 1]]\n" + GOOD_INTEGRAND, ["[domain] box", "not below"]),
    ("box-nan", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[0, nan], [0, 1]]\n" + GOOD_INTEGRAND, ["[domain] box", "NaN"]),
    ("box-bool-bound", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[false, 1], [0, 1]]\n" + GOOD_INTEGRAND, ["[domain] box", "boolean"]),
    ("box-string-bound", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[\"0\", 1], [0, 1]]\n" + GOOD_INTEGRAND, ["[domain] box", "string"]),
    ("box-inf-inf", "[domain]\nvariables = [\"x\", \"y\"]\nbox = [[inf, inf], [0, 1]]\n" + GOOD_INTEGRAND, ["[domain] box", "not below"]),
    # --- simplex ------------------------------------------------------------
    ("simplex-vertex-count", "[domain]\nvariables = [\"x\", \"y\"]\nsimplex = [[0, 0], [1, 0]]\n" + GOOD_INTEGRAND, ["[domain] simplex", "need 3"]),
    ("simplex-vertex-shape", "[domain]\nvariables = [\"x\", \"y\"]\nsimplex = [[0, 0], [1, 0], [0]]\n" + GOOD_INTEGRAND, ["[domain] simplex", "vertex 3"]),
    ("simplex-degenerate", "[domain]\nvariables = [\"x\", \"y\"]\nsimplex = [[0, 0], [1, 1], [2, 2]]\n" + GOOD_INTEGRAND, ["[domain] simplex", "degenerate"]),
    ("simplex-infinite", "[domain]\nvariables = [\"x\", \"y\"]\nsimplex = [[0, 0], [inf, 0], [0, 1]]\n" + GOOD_INTEGRAND, ["[domain] simplex", "finite"]),
    ("simplex-not-list", "[domain]\nvariables = [\"x\"]\nsimplex = \"triangle\"\n" + GOOD_INTEGRAND, ["[domain] simplex", "list"]),
    # --- integrand ----------------------------------------------------------
    ("integrand-both", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x\"\npython = \"m:f\"\n"), ["[integrand] python", "not both"]),
    ("integrand-neither", _p(GOOD_DOMAIN, "[integrand]\nconstants = { k = 1 }\n"), ["[integrand]", "expr"]),
    ("expr-empty", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"  \"\n"), ["[integrand] expr", "empty", ":5:"]),
    ("expr-not-string", _p(GOOD_DOMAIN, "[integrand]\nexpr = 3\n"), ["[integrand] expr", "integer"]),
    ("expr-list-empty", _p(GOOD_DOMAIN, "[integrand]\nexpr = []\n"), ["[integrand] expr", "empty"]),
    ("expr-list-non-string", _p(GOOD_DOMAIN, "[integrand]\nexpr = [\"x\", 2]\n"), ["[integrand] expr", "item 2"]),
    ("expr-unknown-variable", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x * zz\"\n"), ["[integrand] expr", "unknown name 'zz'"]),
    ("expr-unknown-function", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"sqr(x)\"\n"), ["[integrand] expr", "unknown function 'sqr'", "did you mean"]),
    ("expr-attribute", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x.__class__\"\n"), ["[integrand] expr", "attribute"]),
    ("expr-import", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"__import__('os').system('true')\"\n"), ["[integrand] expr"]),
    ("expr-subscript", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x[0]\"\n"), ["[integrand] expr", "subscript"]),
    ("expr-lambda", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"(lambda: 1)()\"\n"), ["[integrand] expr"]),
    ("expr-syntax", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x +* y\"\n"), ["[integrand] expr", "syntax error"]),
    ("expr-keyword-arg", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"exp(x=1)\"\n"), ["[integrand] expr", "keyword"]),
    ("expr-complex", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x + 2j\"\n"), ["[integrand] expr", "complex"]),
    ("expr-list-item-bad", _p(GOOD_DOMAIN, "[integrand]\nexpr = [\"x\", \"y + q\"]\n"), ["[integrand] expr", "item 2", "'q'"]),
    ("constants-not-table", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x\"\nconstants = 3\n"), ["[integrand] constants", "table"]),
    ("constants-not-number", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x * k\"\nconstants = { k = \"2\" }\n"), ["[integrand] constants", "'k'", "number"]),
    ("constants-bool", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x * k\"\nconstants = { k = true }\n"), ["[integrand] constants", "boolean"]),
    ("constants-nan", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x * k\"\nconstants = { k = nan }\n"), ["[integrand] constants", "finite"]),
    ("constants-shadow-variable", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x\"\nconstants = { y = 1 }\n"), ["[integrand] constants", "variable"]),
    ("constants-function-name", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x\"\nconstants = { sin = 1 }\n"), ["[integrand] constants", "function"]),
    ("constants-underscore", _p(GOOD_DOMAIN, "[integrand]\nexpr = \"x\"\nconstants = { _k = 1 }\n"), ["[integrand] constants", "'_'"]),
    ("python-without-trust", _p(GOOD_DOMAIN, "[integrand]\npython = \"mymod:f\"\n"), ["[integrand] python", "--allow-python"]),
    ("python-bad-target", _p(GOOD_DOMAIN, "[integrand]\npython = \"mymod\"\n"), ["[integrand] python", "module:function"]),
    ("python-not-string", _p(GOOD_DOMAIN, "[integrand]\npython = 1\n"), ["[integrand] python", "integer"]),
    # --- goal ---------------------------------------------------------------
    ("rel-tol-negative", _with(extra="[goal]\nrel_tol = -1e-3"), ["[goal] rel_tol", "negative"]),
    ("rel-tol-string", _with(extra="[goal]\nrel_tol = \"1e-3\""), ["[goal] rel_tol", "string"]),
    ("rel-tol-bool", _with(extra="[goal]\nrel_tol = true"), ["[goal] rel_tol", "boolean"]),
    ("abs-tol-negative", _with(extra="[goal]\nabs_tol = -1"), ["[goal] abs_tol", "negative"]),
    ("tolerances-both-zero", _with(extra="[goal]\nrel_tol = 0\nabs_tol = 0"), ["[goal] abs_tol", "both zero"]),
    ("old-max-evals-key", _with(extra="[goal]\nmax_evals = 1000"), ["[goal] max_evals", "now called 'budget'"]),
    ("budget-float", _with(extra="[goal]\nbudget = 1e6"), ["[goal] budget", "whole number"]),
    ("budget-zero", _with(extra="[goal]\nbudget = 0"), ["[goal] budget", "positive"]),
    ("budget-bool", _with(extra="[goal]\nbudget = true"), ["[goal] budget", "boolean"]),
    ("time-limit-zero", _with(extra="[goal]\ntime_limit = 0"), ["[goal] time_limit", "positive"]),
    ("time-limit-string", _with(extra="[goal]\ntime_limit = \"1h\""), ["[goal] time_limit", "string"]),
    # --- method -------------------------------------------------------------
    ("rule-unknown", _with(extra="[method]\nrule = \"genz-malick\""), ["[method] rule", "did you mean 'genz-malik'", "grundmann-moller"]),
    ("rule-not-string", _with(extra="[method]\nrule = 7"), ["[method] rule", "string"]),
    ("rule-gm-on-box", _with(extra="[method]\nrule = \"grundmann-moller\""), ["[method] rule", "simplices"]),
    ("rule-box-on-simplex", "[domain]\nvariables = [\"x\", \"y\"]\nsimplex = [[0, 0], [1, 0], [0, 1]]\n"
     + GOOD_INTEGRAND + "[method]\nrule = \"genz-malik\"\n", ["[method] rule", "grundmann-moller"]),
    ("rule-gm-1d", "[domain]\nvariables = [\"x\"]\nbox = [[0, 1]]\n[integrand]\nexpr = \"x\"\n"
     "[method]\nrule = \"genz-malik\"\n", ["[method] rule", "at least 2 dimensions"]),
    ("degree-even", _with(extra="[method]\ndegree = 4"), ["[method] degree", "odd"]),
    ("degree-small", _with(extra="[method]\ndegree = 1"), ["[method] degree", "at least 3"]),
    ("degree-float", _with(extra="[method]\ndegree = 5.0"), ["[method] degree", "number"]),
    ("workers-zero", _with(extra="[method]\nworkers = 0"), ["[method] workers", "at least 1"]),
    ("workers-word", _with(extra="[method]\nworkers = \"many\""), ["[method] workers", "auto"]),
    ("workers-float", _with(extra="[method]\nworkers = 2.5"), ["[method] workers", "whole number"]),
    ("backend-unknown", _with(extra="[method]\nbackend = \"gpu\""), ["[method] backend", "unknown backend", "dask"]),
    ("cluster-with-serial", _with(extra="[method]\nbackend = \"serial\"\ncluster = \"tcp://h:1\""), ["[method] cluster", "dask"]),
    ("cluster-not-string", _with(extra="[method]\ncluster = 8786"), ["[method] cluster", "scheduler"]),
    # --- reference ----------------------------------------------------------
    ("reference-string", _with(extra="[reference]\nvalue = \"one\"\nsource = \"s\""), ["[reference] value", "number"]),
    ("reference-no-source", _with(extra="[reference]\nvalue = 1.0"), ["[reference] source", "missing"]),
    ("reference-no-value", _with(extra="[reference]\nsource = \"s\""), ["[reference] value", "missing"]),
    ("reference-list-for-scalar", _with(extra="[reference]\nvalue = [1, 2]\nsource = \"s\""), ["[reference] value", "one component"]),
    ("reference-wrong-length", _p(GOOD_DOMAIN, "[integrand]\nexpr = [\"x\", \"y\"]\n",
                                  "[reference]\nvalue = [1, 2, 3]\nsource = \"s\""), ["[reference] value", "3 entries", "2 components"]),
    ("reference-scalar-for-vector", _p(GOOD_DOMAIN, "[integrand]\nexpr = [\"x\", \"y\"]\n",
                                       "[reference]\nvalue = 1\nsource = \"s\""), ["[reference] value", "list of 2"]),
    ("reference-bool", _with(extra="[reference]\nvalue = true\nsource = \"s\""), ["[reference] value", "boolean"]),
]
