"""The order in which fit jobs start: costliest first (longest-processing-time
first, a common practice for spreading jobs over cores; Graham 1969, from memory).
Results do not depend on it (tests/test_workflow.py compares chunkings and cores)."""

from mkforest.data.config import validate_config
from mkforest.jobs.shaping import fit_job_weight


def config():
    """A schema-filled config (the weights read its defaults)."""
    return validate_config(
        {
            "run": "x",
            "trees": {"file": "t.nex"},
            "traits": {"file": "t.tsv", "columns": ["trait", "a", "b"]},
            "models": {
                "one": {"kind": "equal"},
                "mirrored": {"kind": "symmetric"},
                "free": {"kind": "unconstrained"},
                "own": {"kind": "custom", "applies_to": ["trait"], "transitions": {"x -> y": "r"}},
                "free2": {"kind": "unconstrained", "hidden_classes": 2},
                "stretched": {"kind": "equal", "branches": "kappa"},
                "per_event": {"kind": "equal", "branches": "unit"},
            },
            "pairs": {"shells": {"traits": ["a", "b"]}},
        }
    )


def test_costlier_models_start_first():
    c = config()
    w = {m: fit_job_weight(c, "trait", m) for m in c["models"]}
    # measured per-fit CPU on 200-tip, 3-state trees: equal < symmetric < unconstrained
    assert w["one"] < w["mirrored"] < w["own"] < w["free"] < w["free2"]
    # an estimated branch parameter costs more; fixed unit lengths do not
    assert w["stretched"] > w["one"] == w["per_event"]
    assert fit_job_weight(c, "shells", "dependent") > w["free"]


def test_the_config_check_imports_no_compiler_or_scipy():
    """The Snakefile's imports (the config check) are parsed at every Snakemake start and
    by every cluster job: numba and SciPy cost ~0.4 s there and are not needed."""
    import subprocess
    import sys

    code = (
        "import sys; import mkforest.jobs.analyses, mkforest.data.config; "
        "print(sorted(m for m in ('numba', 'scipy', 'matplotlib') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_table_figure_and_methods_jobs_import_no_compiler_or_scipy():
    """aggregate_fits, plot_support and methods run one after another at the end of every
    run: each new process would pay ~0.7 s for numba and SciPy it does not use."""
    import subprocess
    import sys

    code = (
        "import sys; import mkforest.engine.summarise, mkforest.engine.branch_support, "
        "mkforest.report.plots, mkforest.report.methods; "
        "print(sorted(m for m in ('numba', 'scipy') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_pending_scheduler_timers_are_cancelled():
    """Snakemake leaves a one-second threading.Timer behind after each scheduling round;
    the workflow's onsuccess/onerror cancel them so the run ends with its last job."""
    import threading

    from mkforest.jobs.scripting import cancel_scheduler_timers

    fired = []
    timer = threading.Timer(30.0, lambda: fired.append(1))
    timer.start()
    other = threading.Thread(target=lambda: None)  # not a timer: left alone
    cancel_scheduler_timers()
    timer.join(timeout=5.0)
    assert not timer.is_alive() and not fired
    other.start()
    other.join()
