"""Invented firm names and tickers: syllables read through by hand, clashes resolved."""

from __future__ import annotations

import numpy as np


_LETTERS = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
# Every simulated security's identifier starts with this lower-case prefix, a
# form no exchange gives its symbols, so an invented code can never be read as
# a real listing even when its letters happen to match one.
SECURITY_PREFIX = "sim-"

# Invented syllables for firm names; the two-syllable stems were read through
# once by hand to keep well-known company names out.
_HEADS = (
    "Brel", "Cadr", "Dorv", "Vosk", "Grel", "Halv", "Jorr", "Kest", "Lunv", "Morr", "Nesk",
    "Orv", "Pell", "Quor", "Rask", "Selv", "Torv", "Ulm", "Varr", "Yssel", "Zorn", "Thrend",
)
_MIDS = ("", "an", "ir", "ol", "ev")
_TAILS = ("ane", "ica", "ora", "ex", "ith", "ova", "und", "ael", "yn", "aro", "esk", "ium", "olt", "ara", "ent")
_KINDS = (
    "Holdings", "Works", "Group", "Industries", "Partners", "Trading", "Foods", "Mining", "Logistics", "Textiles",
)


def security_code(letters: str) -> str:
    """The identifier of a simulated security: ``SECURITY_PREFIX`` + its letters."""
    return SECURITY_PREFIX + letters


def _tickers(firm_names: np.ndarray, taken: set[str] | frozenset = frozenset()) -> np.ndarray:
    """Distinct identifiers abbreviating the invented names, e.g. ``sim-BRLN``.

    The letters are the stem's first letter followed by its next consonants
    (3 or 4 upper-case letters in all, padded with the initial of the kind of
    business when the stem has fewer than three); letters already taken get
    their last one replaced by the kind's initial, then by A, B, C, ... until
    free. Every identifier carries ``SECURITY_PREFIX`` (see
    :func:`security_code`); the prefix does not change the sort order.
    ``taken``: identifiers already in use (another market's).
    """
    taken = {code.removeprefix(SECURITY_PREFIX) for code in taken}
    out = []
    for name in firm_names.tolist():
        stem, kind = name.upper().split(" ", 1)
        skeleton = stem[0]
        for ch in stem[1:]:
            if ch not in "AEIOUY" and ch != skeleton[-1]:
                skeleton += ch
        skeleton = (skeleton + kind[0] * 2)[: max(3, min(4, len(skeleton)))]
        candidates = [skeleton, skeleton[:-1] + kind[0]] + [skeleton[:-1] + chr(ord("A") + k) for k in range(26)]
        if len(skeleton) == 3:
            candidates += [skeleton + chr(ord("A") + k) for k in range(26)]
        ticker = next((c for c in candidates if c not in taken), None)
        if ticker is None:  # only in markets far larger than any test or demo
            ticker = next(a + b + c + d for a in skeleton[:1] for b in _LETTERS for c in _LETTERS for d in _LETTERS
                          if a + b + c + d not in taken)
        taken.add(ticker)
        out.append(security_code(ticker))
    return np.array(out)


def _firm_names(rng: np.random.Generator, n: int) -> np.ndarray:
    """n distinct invented firm names: stem of invented syllables + a kind of business."""
    sizes = (len(_HEADS), len(_MIDS), len(_TAILS), len(_KINDS))
    # two-syllable stems first (hand-checked), three-syllable ones only for large markets
    two = np.arange(sizes[0] * sizes[2] * sizes[3])
    pick = rng.permutation(two)[:n]
    if n > len(two):
        rest = rng.permutation(np.arange(sizes[0] * (sizes[1] - 1) * sizes[2] * sizes[3]))[: n - len(two)]
        pick = np.concatenate((pick, len(two) + rest))
    two_syllables = pick < len(two)
    code = np.where(two_syllables, pick, pick - len(two))
    per_head = np.where(two_syllables, sizes[2] * sizes[3], (sizes[1] - 1) * sizes[2] * sizes[3])
    head, rest = np.divmod(code, per_head)
    mid = np.where(two_syllables, 0, rest // (sizes[2] * sizes[3]) + 1)
    tail, kind = np.divmod(rest % (sizes[2] * sizes[3]), sizes[3])
    stem = np.char.add(np.char.add(np.array(_HEADS)[head], np.array(_MIDS)[mid]), np.array(_TAILS)[tail])
    return np.char.add(np.char.add(stem, " "), np.array(_KINDS)[kind])
