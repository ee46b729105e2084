"""The window and the command line start from the same seed (issue 14 item 3)."""

from caseview.cli.main import build_parser
from caseview.operations import DEFAULT_SEED
from caseview.operations.fitting import FitCheckOptions, FitOptions
from caseview.operations.outlook import run_outlook, run_targeting


def _seed_defaults() -> dict:
    parser = build_parser()
    commands = next(a for a in parser._actions if a.dest == "command").choices
    found = {}
    for name, sub in commands.items():
        for action in sub._actions:
            if "--seed" in action.option_strings:
                found[name] = action.default
    return found


def test_every_seeded_command_defaults_to_the_window_seed():
    defaults = _seed_defaults()
    assert {"fit", "models", "check-fit", "outlook", "target", "report"} <= set(defaults)
    # report --dates shifted draws fresh offsets unless given a seed (a repeatable shift would undo it)
    assert defaults.pop("report") is None
    assert {name: int(value) for name, value in defaults.items()} == {name: DEFAULT_SEED for name in defaults}


def test_the_application_functions_default_to_the_same_seed():
    import inspect

    assert FitOptions().seed == DEFAULT_SEED and FitCheckOptions().seed == DEFAULT_SEED
    for function in (run_outlook, run_targeting):
        assert inspect.signature(function).parameters["seed"].default == DEFAULT_SEED


def test_the_window_uses_the_same_seed(qapp):
    from caseview.gui.fit_check_chart import CHECK_SEED

    assert CHECK_SEED == DEFAULT_SEED
