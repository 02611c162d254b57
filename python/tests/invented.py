"""An invented register for the Spark jobs' tests and scripts/bench-spark.py: names of
places on invented islands, built from invented syllables, about a fifth of them entered
again with one or two typos (so that deduplication has work to do). Nothing here names a
real place or person."""

import random

_ONSETS = ["b", "br", "d", "dr", "f", "g", "gr", "h", "k", "kl", "l", "m", "n", "p", "r", "s", "sk", "st", "t", "th", "v", "w"]
_VOWELS = ["a", "e", "i", "o", "u", "ai", "ei", "ou", "y"]
_CODAS = ["", "", "n", "r", "l", "th", "sk", "m", "nd", "rn", "v"]
_KINDS = ["Quay", "Lane", "Row", "Steps", "Wynd", "Holme", "Strand", "Landing", "Moor", "Gate"]
_LETTERS = "abcdefghijklmnopqrstuvwxyz"


def _word(rng: random.Random) -> str:
    syllables = rng.choice([1, 2, 2, 3])
    w = "".join(rng.choice(_ONSETS) + rng.choice(_VOWELS) + rng.choice(_CODAS) for _ in range(syllables))
    return w.capitalize()


def typo(rng: random.Random, text: str, edits: int) -> str:
    """``text`` with ``edits`` random edits: a substitution, insertion, deletion or a swap of
    neighbours (a swap is two edits under Levenshtein)."""
    for _ in range(edits):
        i = rng.randrange(len(text))
        op = rng.choice("sidt")
        if op == "s":
            text = text[:i] + rng.choice(_LETTERS) + text[i + 1 :]
        elif op == "i":
            text = text[:i] + rng.choice(_LETTERS) + text[i:]
        elif op == "d" and len(text) > 3:
            text = text[:i] + text[i + 1 :]
        elif op == "t" and i + 1 < len(text):
            text = text[:i] + text[i + 1] + text[i] + text[i + 2 :]
    return text


def register(n: int, seed: int = 7) -> list[str]:
    """``n`` names, in a fixed order for a seed."""
    rng = random.Random(seed)
    out = []
    while len(out) < n:
        if out and rng.random() < 0.2:
            out.append(typo(rng, rng.choice(out), rng.choice([1, 1, 2])))
        else:
            words = [_word(rng) for _ in range(rng.choice([1, 2, 2]))]
            out.append(" ".join(words + [rng.choice(_KINDS)]))
    return out
