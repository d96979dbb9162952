"""What a clean or bars job loads: the stage's own modules, not the rest of the project.

On a cluster every job is a fresh process, so each module a job imports
costs start-up time in every job. A clean or bars job runs in a fresh
interpreter here, and the modules it loaded are read from ``sys.modules``
afterwards; the time each import costs is measured by
``python -X importtime -c "import liqpanel.bars.job"`` (not asserted here).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from liqpanel.config import validate_config
from liqpanel.simulate import simulate_market, write_market

# heavy modules only the measures, panel, models and report stages (or the
# config check before a run) need
NOT_IN_A_TRADE_JOB = ("scipy", "jsonschema", "liqpanel.report", "liqpanel.panel",
                      "liqpanel.report.replication", "liqpanel.models", "matplotlib", "linearmodels", "statsmodels",
                      "exchange_calendars",  # a profile without `calendar:` never loads the calendar library
                      "liqpanel.measures")  # the bar columns come from liqpanel.bars.BAR_COLUMNS_OF

JOB = """
import json, sys
from liqpanel.bars.job import run_bars_month
from liqpanel.clean.job import run_clean
from liqpanel.core.settings import for_job
config = json.loads(sys.argv[1])
paths = json.loads(sys.argv[2])
run_clean("2021-01", paths["clean"], paths["audit"], paths["quotes"], **for_job(config, run_clean))
run_bars_month(paths["clean"], paths["bars"], paths["quotes"], **for_job(config, run_bars_month))
print(json.dumps(sorted(sys.modules)))
"""


@pytest.mark.parametrize("measures", [{"roll_spread": None, "amihud": None}, {"effective_spread": None}])
def test_clean_and_bars_jobs_load_neither_scipy_nor_the_report_nor_the_schema(tmp_path, measures):
    write_market(simulate_market(n_securities=3, n_months=1, seed=5, intensity_center=5.0), tmp_path)
    config = validate_config({
        "sample": {"start": "2021-01", "end": "2021-01"}, "market": "demo", "measures": measures,
        "inputs": {"trades": str(tmp_path / "trades.parquet"), "quotes": str(tmp_path / "quotes.parquet")},
    })
    paths = {name: str(tmp_path / "work" / f"{name}.parquet") for name in ("clean", "audit", "quotes", "bars")}
    done = subprocess.run([sys.executable, "-c", JOB, json.dumps(config), json.dumps(paths)],
                          capture_output=True, text=True, check=True)
    loaded = json.loads(done.stdout.strip().splitlines()[-1])
    heavy = [m for m in loaded if any(m == h or m.startswith(h + ".") for h in NOT_IN_A_TRADE_JOB)]
    assert heavy == []
    assert "liqpanel.clean" in loaded and "liqpanel.bars" in loaded  # the job did run its stages
    assert Path(paths["bars"]).exists()
