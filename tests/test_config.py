"""Config validation: a misspelled or unknown key stops the run naming it."""

import copy
from pathlib import Path

import pytest
import yaml

from liqpanel.cli import main
from liqpanel.config import load_config, validate_config
from liqpanel.core.errors import ConfigError

DEMO = Path(__file__).resolve().parents[1] / "config" / "config.yaml"


def _demo():
    return yaml.safe_load(DEMO.read_text())


def test_demo_config_is_valid_and_defaults_are_filled():
    cfg = load_config(DEMO)
    assert cfg["clean"]["duplicates"] is True
    assert cfg["inputs"]["adjustments"] is None  # default filled
    assert cfg["bars"]["horizon_minutes"] == 5  # default filled
    assert cfg["run"]["work_dir"] == "work"


def test_a_config_checked_before_gets_the_same_defaults_without_loading_the_measures():
    # a cluster job's process: the main process checked the config in full; the job fills the same
    # defaults but loads neither the measure registry nor the study (a fresh interpreter tells)
    import json
    import subprocess
    import sys

    assert validate_config(_demo(), checked_before=True) == load_config(DEMO)
    job = ("import json, sys, yaml; from liqpanel.config import validate_config; "
           "validate_config(yaml.safe_load(open(sys.argv[1])), checked_before=True); print(json.dumps(sorted(sys.modules)))")
    done = subprocess.run([sys.executable, "-c", job, str(DEMO)], capture_output=True, text=True, check=True)
    loaded = json.loads(done.stdout)
    assert "liqpanel.config" in loaded and "jsonschema" in loaded  # the schema was applied
    assert not [m for m in loaded if m.startswith(("liqpanel.measures", "liqpanel.study", "liqpanel.models"))]
    cfg = _demo()
    cfg["measures"]["rol_spread"] = {}  # left to the main process's full check
    assert "rol_spread" in validate_config(cfg, checked_before=True)["measures"]


@pytest.mark.parametrize(
    "path, bad_key",
    [((), "measurs"), (("clean",), "dupliactes"), (("inputs",), "trade_file"), (("run",), "colour")],
)
def test_unknown_key_is_named(path, bad_key):
    cfg = _demo()
    node = cfg
    for p in path:
        node = node.setdefault(p, {})
    node[bad_key] = 1
    with pytest.raises(ConfigError, match=f"unknown key '{bad_key}'"):
        validate_config(cfg)


def test_unknown_measure_lists_the_valid_ones():
    cfg = _demo()
    cfg["measures"]["rol_spread"] = {}
    with pytest.raises(ConfigError, match="unknown measure 'rol_spread'.*roll_spread"):
        validate_config(cfg)


def test_unknown_measure_option_is_named():
    cfg = _demo()
    cfg["measures"]["roll_spread"]["convension"] = "zero"
    with pytest.raises(ConfigError, match="no option 'convension'"):
        validate_config(cfg)


@pytest.mark.parametrize(
    "entry, message",
    [
        ({"estimator": "fixed_effects", "effects": ["entity"]}, "'effects' has 'entity'; the word here is 'security'"),
        ({"estimator": "pooled", "covariance": "unadjusted"}, "'covariance' has 'unadjusted'; the word here is 'plain'"),
        ({"estimator": "driscoll_kraay", "covariance": "kernel"}, "'covariance' has 'kernel'; the word here is 'bartlett'"),
    ],
)
def test_regression_option_words_are_checked_when_the_config_loads(entry, message):
    cfg = _demo()
    cfg["models"]["regressions"].append({"name": "extra", "regressors": ["roll_spread"], **entry})
    with pytest.raises(ConfigError, match=f"model 'extra': {message}"):
        validate_config(cfg)


def test_wrong_type_is_explained():
    cfg = _demo()
    cfg["sample"]["start"] = "January"
    with pytest.raises(ConfigError, match="sample.start"):
        validate_config(cfg)


def test_cli_reports_a_bad_key_without_a_traceback(tmp_path, capsys):
    cfg = _demo()
    cfg["measurs"] = {}
    path = tmp_path / "bad.yaml"
    path.write_text(yaml.safe_dump(cfg))
    assert main(["check-config", str(path)]) == 2
    err = capsys.readouterr().err
    assert "unknown key 'measurs'" in err and "Traceback" not in err
