"""Sphinx configuration of the lossfit guide.

Build (one line, warnings are errors): ``python -m sphinx -W -b html docs build/docs``.
Sources are MyST Markdown (``docs/**/*.md``) and the notebooks (``docs/notebooks`` is a
link to ``notebooks/``), rendered with the outputs stored in them and never executed
here. The API reference is generated from the ``__all__`` of each public module by the
``lossfit-api`` directive defined below: a public name without a docstring is a warning,
so it fails the build.
"""

import importlib
import inspect
import os
import pkgutil
import re
import sys

from docutils import nodes
from docutils.statemachine import StringList
from sphinx.pycode import ModuleAnalyzer
from sphinx.util import logging
from sphinx.util.docutils import SphinxDirective
from sphinx.util.nodes import nested_parse_with_titles

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))          # this checkout's lossfit, installed or not

import lossfit  # noqa: E402

project = "lossfit"
author = "the lossfit developers"
copyright = "the lossfit developers"
release = lossfit.__version__
version = release

extensions = ["myst_nb", "sphinx.ext.autodoc", "sphinx.ext.autosummary", "numpydoc", "sphinx.ext.mathjax"]
source_suffix = {".rst": "restructuredtext", ".md": "myst-nb", ".ipynb": "myst-nb"}
root_doc = "index"
exclude_patterns = ["_build", "**.ipynb_checkpoints", "README.md"]
# every docs/*.png lands in the build folder with the page that shows it
html_theme = "alabaster"
html_title = f"lossfit {release}"
html_static_path = []
html_theme_options = {"description": "Thermally averaged zero-range fits of three- and atom–dimer loss",
                      "fixed_sidebar": False, "page_width": "1100px"}

# notebooks: rendered with their stored outputs, never executed during the build
nb_execution_mode = "off"
nb_merge_streams = True
myst_enable_extensions = ["dollarmath", "colon_fence", "deflist"]
myst_heading_anchors = 3

# broken cross-references are warnings (and -W makes them errors)
nitpicky = True
nitpick_ignore_regex = [
    # names of other projects (no intersphinx: the build needs no network)
    (r"py:.*", r"(numpy|np|matplotlib|pandas|arviz|emcee|h5py|scipy|corner|numba|mpi4py|pathlib|os|collections"
               r"|typing|concurrent|multiprocessing)(\..*)?"),
]

autodoc_member_order = "bysource"
autodoc_typehints = "none"
autodoc_default_options = {"members": True}
numpydoc_show_class_members = False
numpydoc_xref_param_type = False
suppress_warnings = []

logger = logging.getLogger("lossfit.guide")

#: Sections of the reference page of the top-level namespace. A public name not listed here
#: is still documented, under "More" (so names others add always get an entry).
GROUPS = {
    "lossfit": [
        ("Species and Efimov parameters", ["Species", "species", "known_species", "register_species", "Efimov",
                                           "S0", "SCALING_FACTOR"]),
        ("Loss rates", ["l3", "beta", "k3", "beta_energy", "l3_threshold", "beta_threshold", "convert_l3",
                        "EnergyModel", "available_models", "register_model", "trimer_energies"]),
        ("Data", ["LossSpectrum", "read_spectra", "write_spectra", "read_csv", "DecayCurve", "write_campaign",
                  "read_campaign", "read_curves_csv"]),
        ("Fits and results", ["fit", "FitResult", "LogUniform", "Uniform", "LogNormal", "Normal", "fit_curve",
                              "spectrum_from_curves", "load_result"]),
        ("Analyses", ["temperature_study", "compare_models", "published_results"]),
        ("Two identical bosons and a third atom", ["heteronuclear", "HeteronuclearSystem", "scaling_test",
                                                   "simulate_mixture_decay", "fit_mixture_curve"]),
        ("The experiment: traps, decay, resonances",
         ["HarmonicTrap", "simulate_decay", "TabulatedRate", "FeshbachResonance", "OverlappingResonances",
          "ScatteringLengthTable", "average_over_field_noise", "calibrate_from_binding_energies"]),
        ("Errors and version", ["LossfitError", "LossfitValueError", "errors", "__version__"]),
    ],
}


def _attribute_doc(module, name):
    """The documentation of a module-level value: its ``#:`` comment, else the comment at
    the end of its assignment line, searched in the module and in the modules of the
    package it imports values from."""
    value = getattr(module, name)
    candidates = [module.__name__] + sorted(m.__name__ for m in vars(module).values()
                                            if inspect.ismodule(m) and m.__name__.startswith("lossfit"))
    candidates += ["lossfit.constants", "lossfit._version", "lossfit.units"]
    for candidate in candidates:
        home = importlib.import_module(candidate)
        if getattr(home, name, None) is not value:
            continue
        analyzer = ModuleAnalyzer.for_module(candidate)
        docs = analyzer.find_attr_docs()
        if ("", name) in docs:
            return "\n".join(docs[("", name)]).strip()
        found = re.search(rf"^{re.escape(name)}\s*=.*?#\s*(.+)$", analyzer.code, flags=re.M)
        if found:
            return found.group(1).strip()
    return ""


#: Modules with a reference page (docs/api/<module>.rst), in the order of the reference.
API_MODULES = ["lossfit", "lossfit.plotting", "lossfit.inference", "lossfit.inference.curve_fits",
               "lossfit.inference.temperature_study", "lossfit.inference.model_comparison", "lossfit.rates",
               "lossfit.mixture", "lossfit.experiment.mixture_decay", "lossfit.inference.mixture_curve_fits",
               "lossfit.batch.jobs", "lossfit.constants", "lossfit.units", "lossfit.errors"]


def _homes():
    """Where each public object is documented in full: ``lossfit.NAME`` for the top-level
    names, else its defining module's page, else the first page that lists it."""
    homes = {}
    for module_name in API_MODULES:
        module = importlib.import_module(module_name)
        for name in module.__all__:
            obj = getattr(module, name)
            if inspect.ismodule(obj) or not (inspect.isclass(obj) or callable(obj)):
                continue
            key = id(obj)
            defining = getattr(obj, "__module__", None)
            if key not in homes or (homes[key][0] != "lossfit" and module_name == defining):
                homes[key] = (module_name, name)
    return homes


def _role(obj):
    return "class" if inspect.isclass(obj) else "func"


def _entry(module, name, homes):
    """reST lines documenting ``module.name`` and its docstring (empty if it has none)."""
    obj = getattr(module, name)
    full = f"{module.__name__}.{name}"
    if inspect.ismodule(obj):
        where = f" (reference: :doc:`/api/{obj.__name__}`)" if obj.__name__ in API_MODULES else ""
        return [f"``{full}``: the module ``{obj.__name__}``{where}.", ""], inspect.getdoc(obj) or ""
    if inspect.isclass(obj) or callable(obj):
        doc = inspect.getdoc(obj) or ""
        home = homes.get(id(obj), (module.__name__, name))
        if home != (module.__name__, name):
            target = ".".join(home)
            if inspect.isclass(obj) or getattr(obj, "__module__", None) != module.__name__:
                return [f"* ``{name}``: documented as :py:{_role(obj)}:`{target}`.", ""], doc
            # a function defined here but documented under lossfit: its own name resolves too
            return [f".. py:function:: {full}(...)", "   :no-index-entry:", "   :no-contents-entry:", "",
                    f"   Documented as :py:func:`{target}`.", ""], doc
        directive = "autoclass" if inspect.isclass(obj) else "autofunction"
        return [f".. {directive}:: {full}", ""], doc
    doc = _attribute_doc(module, name)
    lines = [f".. py:data:: {name}", f"   :module: {module.__name__}"]
    if isinstance(obj, (int, float, str)) and len(repr(obj)) < 60:
        lines.append(f"   :value: {obj!r}")
    body = doc.splitlines()
    _plain_text_docstring(None, "data", full, obj, {}, body)
    lines += [""] + ["   " + line for line in body] + [""]
    return lines, doc


class LossfitApi(SphinxDirective):
    """``.. lossfit-api:: module``: the module's docstring, then every name of its
    ``__all__`` with its docstring, in the sections of :data:`GROUPS` (the rest under
    "More"). A name documented in full on another page is listed with a link."""

    required_arguments = 1
    has_content = False

    def run(self):
        module = importlib.import_module(self.arguments[0])
        homes = _homes()
        names = list(module.__all__)
        groups = GROUPS.get(module.__name__, [])
        listed = {n for _, members in groups for n in members}
        sections = [(title, [n for n in members if n in names]) for title, members in groups]
        rest = [n for n in names if n not in listed]
        if rest:
            sections.append(("More" if groups else "Public names", rest))
        lines = [f".. currentmodule:: {module.__name__}", ""]
        if module.__name__ != "lossfit":
            lines += [f".. automodule:: {module.__name__}", "   :no-members:", ""]
        for title, members in sections:
            if not members:
                continue
            lines += [title, "-" * len(title), ""]
            lines += [".. autosummary::", ""] + [f"   {n}" for n in members] + [""]
            for name in members:
                entry, doc = _entry(module, name, homes)
                if not doc:
                    logger.warning(f"public name {module.__name__}.{name} has no docstring",
                                   location=(self.env.docname, self.lineno))
                lines += entry
        node = nodes.section()
        node.document = self.state.document
        nested_parse_with_titles(self.state, StringList(lines, source=f"<{module.__name__}.__all__>"), node)
        return node.children


_HOMES = {}
_NAMES = {}           # simple name -> dotted paths of lossfit objects of that name


def _index_names():
    """Every public module-level name and class member of the package, by simple name."""
    for info in pkgutil.walk_packages(lossfit.__path__, "lossfit."):
        if ".solver" in info.name or info.name.endswith("__main__"):
            continue
        try:
            module = importlib.import_module(info.name)
        except Exception:                                    # an optional dependency is missing
            continue
        for name, obj in vars(module).items():
            if name.startswith("__") or getattr(obj, "__module__", module.__name__) != module.__name__:
                continue
            _NAMES.setdefault(name, set()).add(f"{module.__name__}.{name}")
            if inspect.isclass(obj):
                for member in vars(obj):
                    if not member.startswith("_"):
                        _NAMES.setdefault(member, set()).add(f"{module.__name__}.{name}.{member}")


def _lookup(path):
    """The object a dotted lossfit path names, or None."""
    parts = path.split(".")
    for cut in range(len(parts), 0, -1):
        try:
            obj = importlib.import_module(".".join(parts[:cut]))
        except ImportError:
            continue
        for part in parts[cut:]:
            obj = getattr(obj, part, None)
            if obj is None:
                return None
        return obj
    return None


def _resolve_lossfit_reference(app, env, node, contnode):
    """A Python reference to a real lossfit object that is documented under another name
    (``lossfit.inference.curve_fits.fit_curve`` is :func:`lossfit.fit_curve`) links there; a
    real but private object (a module, a helper) renders as literal text. Anything else stays
    unresolved and fails the build."""
    if node.get("refdomain") != "py":
        return None
    target = node["reftarget"].lstrip(".~")
    context = node.get("py:module") or ""
    candidates = [target]
    if context:
        parts = context.split(".")
        candidates += [".".join(parts[:n] + [target]) for n in range(len(parts), 0, -1)]
        cls = node.get("py:class")
        if cls:
            candidates.insert(0, f"{context}.{cls}.{target}")
    candidates.append(f"lossfit.{target}")
    if len(_NAMES.get(target, ())) == 1:                # an unqualified name unique in the package
        candidates += sorted(_NAMES[target])
    for path in candidates:
        if not path.startswith("lossfit"):
            continue
        obj = _lookup(path)
        if obj is None:
            continue
        parts = path.split(".")
        for cut in range(len(parts), 0, -1):                   # the longest prefix with a home
            home = _HOMES.get(id(_lookup(".".join(parts[:cut]))))
            if home:
                new = ".".join(list(home) + parts[cut:])
                if new != node["reftarget"]:
                    found = env.domains["py"].resolve_xref(env, node["refdoc"], app.builder, "obj", new, node,
                                                           contnode)
                    if found is not None:
                        return found
                break
        return contnode                                            # real, documented nowhere: plain text
    return None


def _plain_text_docstring(app, what, name, obj, options, lines):
    """Docstrings use plain-text notation (|a|, a_-, a_+) as read by ``help()``: escape the
    characters reST would take for substitutions and link targets, outside literals, and
    lengthen section underlines that are too short."""
    literal = False
    for i, line in enumerate(lines):
        stripped = line.strip()
        if stripped.startswith(".. ") or stripped.endswith("::"):
            literal = stripped.endswith("::")
            continue
        if literal and (not stripped or line.startswith((" ", "\t"))):
            continue
        literal = False
        if stripped and set(stripped) <= set("-=~^") and i > 0 and lines[i - 1].strip():
            if len(stripped) < len(lines[i - 1].strip()):
                lines[i] = line.replace(stripped, stripped[0] * len(lines[i - 1].strip()))
            continue
        pieces = re.split(r"(``.*?``|`[^`]*`)", line)
        for j in range(0, len(pieces), 2):
            pieces[j] = re.sub(r"\|", r"\\|", pieces[j])
            pieces[j] = re.sub(r"(?<=\w)_(?=[-+*)\]}/]|\s|$|[,.;:](?:\s|$))", r"\\_", pieces[j])
        lines[i] = "".join(pieces)


def _require_docstring(app, what, name, obj, options, lines):
    """Every documented function, class, method and property has a docstring (its own or
    inherited): a missing one is a warning, so it fails the build."""
    if what in ("function", "class", "method", "property", "exception") and not inspect.getdoc(obj):
        logger.warning(f"public name {name} has no docstring", type="lossfit", subtype="docstring")


def _remember_homes(app):
    _HOMES.update(_homes())
    _index_names()


def setup(app):
    app.add_directive("lossfit-api", LossfitApi)
    app.connect("builder-inited", _remember_homes)
    app.connect("missing-reference", _resolve_lossfit_reference)
    app.connect("autodoc-process-docstring", _plain_text_docstring, priority=400)
    app.connect("autodoc-process-docstring", _require_docstring)
    return {"parallel_read_safe": True}
