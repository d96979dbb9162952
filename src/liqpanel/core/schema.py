"""Where the package keeps its workflow and config schema, and the schema read from its YAML file.

The schema (``workflow/schemas/config.schema.yaml``) is the single source of
every config default; ``liqpanel.config`` validates a config against it and
``liqpanel.core.runtime`` reads the default engine threads from it.
"""

from __future__ import annotations

from pathlib import Path

import yaml

PACKAGE_DIR = Path(__file__).resolve().parents[1]
WORKFLOW_DIR = PACKAGE_DIR / "workflow"
SNAKEFILE = WORKFLOW_DIR / "Snakefile"
SCHEMA_PATH = WORKFLOW_DIR / "schemas" / "config.schema.yaml"
MARKETS_DIR = PACKAGE_DIR / "market_profiles"


# libyaml's parser where PyYAML was built with it (the same documents, about ten times faster)
LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def load_schema(path: Path = SCHEMA_PATH) -> dict:
    with open(path) as fh:
        return yaml.load(fh, Loader=LOADER)
