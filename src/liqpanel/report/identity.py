"""The run-id: SHA-256 over the config as run, every input file's checksum and the package version."""

from __future__ import annotations

import copy
import hashlib
import json
import os
import re
from pathlib import Path
from typing import Any

import liqpanel
from liqpanel.core.io import expand_inputs, sha256_file, write_text


OUTPUT_LOCATIONS = ("results_dir", "work_dir")
CHECKSUM_CACHE = Path(".snakemake") / "liqpanel-checksums.json"


def canonical_json(obj: Any) -> str:
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)


def input_entries(config: dict) -> list[tuple[str, str]]:
    """(where in the config, path) of every input file the config names.

    Inputs are the strings directly under ``inputs:``, the ``path`` of each
    entry of a list under ``inputs:`` (e.g. characteristics sources), and the
    market profile.
    """
    from liqpanel.config import load_market, market_path

    entries = []
    for key, value in sorted((config.get("inputs") or {}).items()):
        if isinstance(value, str):
            entries.append((f"inputs.{key}", value))
        elif isinstance(value, list):
            entries += [
                (f"inputs.{key}[{i}].path", item["path"])
                for i, item in enumerate(value)
                if isinstance(item, dict) and isinstance(item.get("path"), str)
            ]
    if isinstance(config.get("market"), str):
        load_market(config["market"])  # a clear error if the profile is missing
        entries.append(("market", _shown_path(market_path(config["market"]))))
    for code, name in sorted(((config.get("markets") or {}).get("profiles") or {}).items()):
        load_market(str(name))
        entries.append((f"markets.profiles.{code}", _shown_path(market_path(str(name)))))
    return entries


def _shown_path(path: Path) -> str:
    """Relative to the working directory when inside it (so checksum files travel)."""
    try:
        return str(path.resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(path)


def input_files(config: dict) -> list[str]:
    """Every input file the config names, globs expanded, sorted."""
    return sorted({f for _, path in input_entries(config) for f in expand_inputs(path)})


def _file_key(path: str) -> str:
    st = os.stat(path)
    return f"{st.st_size}:{st.st_mtime_ns}:{st.st_ino}"


def input_checksum(path: str, cache: dict[str, dict[str, str]] | None = None) -> str:
    """SHA-256 of an input file, reused from ``cache`` while size and mtime are unchanged."""
    real, key = os.path.realpath(path), _file_key(path)
    hit = (cache or {}).get(real)
    if hit and hit.get("key") == key:
        return hit["sha256"]
    digest = sha256_file(path)
    if cache is not None:
        cache[real] = {"key": key, "sha256": digest}
    return digest


def _load_cache() -> dict:
    try:
        return json.loads(CHECKSUM_CACHE.read_text())
    except (OSError, ValueError):
        return {}


def run_identity(config: dict, version: str = liqpanel.__version__, *, use_cache: bool = True) -> dict:
    """What the run-id hashes: the config as run with input paths replaced by
    content checksums and output locations left out, and the package version."""
    cache = _load_cache() if use_cache else None
    before = copy.deepcopy(cache)
    ident = copy.deepcopy(config)
    for key in OUTPUT_LOCATIONS:
        (ident.get("run") or {}).pop(key, None)
    for where, path in input_entries(config):
        files = expand_inputs(path)
        sums = [input_checksum(f, cache) for f in files]
        digest = sums[0] if len(files) == 1 and files[0] == path else sums
        _set(ident, where, {"sha256": digest})
    if use_cache and cache != before and CHECKSUM_CACHE.parent.is_dir():
        write_text(json.dumps(cache, indent=1, sort_keys=True) + "\n", CHECKSUM_CACHE)
    return {"config": ident, "version": version}


def _set(obj: dict, where: str, value: Any) -> None:
    """Set ``obj`` at a path like ``inputs.characteristics[0].path``."""
    parts = re.findall(r"[^.\[\]]+|\[\d+\]", where)
    for part in parts[:-1]:
        obj = obj[int(part[1:-1])] if part.startswith("[") else obj[part]
    last = parts[-1]
    if last.startswith("["):
        obj[int(last[1:-1])] = value
    else:
        obj[last] = value


def run_id(config: dict, version: str = liqpanel.__version__, *, use_cache: bool = True) -> str:
    """12 hex digits of SHA-256 over :func:`run_identity`."""
    payload = canonical_json(run_identity(config, version, use_cache=use_cache))
    return hashlib.sha256(payload.encode()).hexdigest()[:12]
