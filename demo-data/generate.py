#!/usr/bin/env python3
"""Writes the demo data: the postal register of Vessmark, an invented archipelago.

Everything is made up from invented syllables with a fixed seed, so the output is the same
byte for byte on every run:

    register.csv   code,name,island,kind  (about 30,000 rows)
    names.txt      the name column, one per line
    lookups.txt    500 misspelt look-ups of register names (1-3 edits, some case changes)
"""
import os
import random

HERE = os.path.dirname(os.path.abspath(__file__))
rng = random.Random(1729)

ONSETS = ["", "b", "d", "f", "g", "h", "k", "l", "m", "n", "r", "s", "t", "v", "th", "sk",
          "br", "dr", "gl", "kv", "st", "tr", "hv", "sj"]
VOWELS = ["a", "e", "i", "o", "u", "y", "ae", "ei", "ou", "å", "ø", "é"]
CODAS = ["", "", "n", "r", "l", "s", "th", "rn", "nd", "sk", "ll", "rk", "m", "v"]
ISLANDS = ["Vessa", "Orthmere", "Kaldra", "Tessun", "Brinholm", "Skerrow", "Hvallan",
           "Mirrowey", "Dunsgale"]
STREET_KINDS = ["Quay", "Row", "Steps", "Strand", "Reach", "Landing", "Hollow", "Wynd",
                "Lane", "Rise", "Close", "Causeway", "Slip", "Brae"]
PREFIXES = ["Upper", "Lower", "Old", "New", "North", "South", "East", "West", "Little"]


def word(syllables):
    w = "".join(rng.choice(ONSETS) + rng.choice(VOWELS) + rng.choice(CODAS)
                for _ in range(syllables))
    return w[:1].upper() + w[1:]


def main():
    stems = sorted({word(rng.choice([2, 2, 3])) for _ in range(9000)})
    rows = []
    seen = set()
    code = 0
    while len(rows) < 30000:
        stem = rng.choice(stems)
        r = rng.random()
        if r < 0.55:
            name, kind = f"{stem} {rng.choice(STREET_KINDS)}", "street"
        elif r < 0.75:
            name, kind = f"{rng.choice(PREFIXES)} {stem}", "settlement"
        elif r < 0.9:
            name, kind = stem, "settlement"
        else:
            name, kind = f"{stem}{rng.choice(['by', 'wick', 'holm', 'stead'])} {rng.choice(STREET_KINDS)}", "lane"
        island = rng.choice(ISLANDS)
        if (name, island) in seen:
            continue
        seen.add((name, island))
        code += 1
        rows.append((f"{island[:2].upper()}-{code:05d}", name, island, kind))

    with open(os.path.join(HERE, "register.csv"), "w", encoding="utf-8", newline="") as f:
        f.write("code,name,island,kind\n")
        for r in rows:
            f.write(",".join(r) + "\n")
    with open(os.path.join(HERE, "names.txt"), "w", encoding="utf-8", newline="") as f:
        for r in rows:
            f.write(r[1] + "\n")

    lookups = []
    for _ in range(500):
        name = list(rng.choice(rows)[1])
        letters = sorted(set(c for c in name if c.isalpha()))
        for _ in range(rng.choice([1, 1, 2, 3])):
            op = rng.randrange(4)
            at = rng.randrange(len(name))
            if op == 0:
                name.insert(at, rng.choice(letters))
            elif op == 1 and len(name) > 3:
                del name[at]
            elif op == 2:
                name[at] = rng.choice(letters)
            elif at + 1 < len(name):
                name[at], name[at + 1] = name[at + 1], name[at]
        s = "".join(name).strip() or "Vessa"
        if rng.random() < 0.05:
            s = s.lower()
        lookups.append(s)
    with open(os.path.join(HERE, "lookups.txt"), "w", encoding="utf-8", newline="") as f:
        f.write("\n".join(lookups) + "\n")


if __name__ == "__main__":
    main()
