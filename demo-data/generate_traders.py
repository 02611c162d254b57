#!/usr/bin/env python3
"""Writes the trading register of Vessmark, with planted duplicates, and the truth about them.

All names are invented (surnames from invented syllables, trade words in plain English);
fixed seed, byte-for-byte identical output on every run; Python 3 standard library only.

    traders.csv        code,name,island  one row per entry: 2,400 firms, some entered more
                       than once under a variant of their name (about 3,200 rows)
    traders-truth.csv  code,firm,kind    the firm of every code, and how its name was made:
                       `original` (the firm's own name, one per firm) or the kind of variant

Kinds of variant, each made from the firm's original name and nothing else:

    typo    one or two char edits inside one word (insert, delete, substitute, swap neighbours)
    case    the case changed (all upper, all lower, or one word lower-cased)
    swap    the words reordered (the first word moved to the end, or two words swapped)
    drop    one word left out (names of three or more words)
    suffix  a legal suffix added (` Ltd`, ` Ltd.`, ` & Co`, ` & Co.`, ` Co`, ` Trading Co`)
    punct   punctuation added or removed (a hyphen for a space, a comma or a full stop
            added, the name's own punctuation dropped)

Distinct firms share surnames and trade words, as real registers do, so that near misses
between different firms exist; no variant reads the same as another firm's name after
lower-casing, punctuation folding and sorting its words.
"""
import csv
import os
import random
import sys

# The files go beside this script, or into the folder given as the only argument.
HERE = sys.argv[1] if len(sys.argv) > 1 else os.path.dirname(os.path.abspath(__file__))
rng = random.Random(8191)

ONSETS = ["", "b", "d", "f", "g", "h", "k", "l", "m", "n", "r", "s", "t", "v", "th", "sk",
          "br", "dr", "gl", "kv", "st", "tr", "hv", "sj"]
VOWELS = ["a", "e", "i", "o", "u", "y", "ae", "ei", "ou", "å", "ø", "é"]
CODAS = ["", "", "n", "r", "l", "s", "th", "rn", "nd", "sk", "ll", "rk", "m", "v"]
ISLANDS = ["Vessa", "Orthmere", "Kaldra", "Tessun", "Brinholm", "Skerrow", "Hvallan",
           "Mirrowey", "Dunsgale"]
TRADES = ["Marine", "Supply", "Chandlers", "Rope", "Net", "Sail", "Salt", "Fish", "Timber",
          "Boat", "Stores", "Provisions", "Freight", "Cargo", "Wool", "Oyster", "Kelp",
          "Smokehouse", "Cooperage", "Ironworks", "Tackle", "Ferry", "Harbour", "Dock",
          "Lantern", "Peat", "Amber", "Tar", "Ice", "Grain"]
KINDS = ["Traders", "Trading", "Merchants", "Company", "Works", "Brothers", "Partners",
         "House", "Exchange", "Agency", "Yard", "Shipping"]
SUFFIXES = [" Ltd", " Ltd.", " & Co", " & Co.", " Co", " Trading Co"]
FIRMS = 2400
VARIANT_KINDS = ["typo", "case", "swap", "drop", "suffix", "punct"]


def word(syllables):
    w = "".join(rng.choice(ONSETS) + rng.choice(VOWELS) + rng.choice(CODAS)
                for _ in range(syllables))
    return w[:1].upper() + w[1:]


def comparison_form(name):
    """Lower case, punctuation as space, words sorted: two names of one form are one name."""
    folded = "".join(" " if not (c.isalnum() or c.isspace()) else c for c in name.lower())
    return " ".join(sorted(folded.split()))


def firm_name(surnames):
    s, t = rng.choice(surnames), rng.choice(TRADES)
    r = rng.random()
    if r < 0.35:
        return f"{s} {t} {rng.choice(KINDS)}"
    if r < 0.5:
        return f"{s} & {rng.choice(surnames)} {t}"
    if r < 0.6:
        return f"{t} {rng.choice(KINDS)} of {rng.choice(ISLANDS)}"
    if r < 0.7:
        return f"{s}'s {t} {rng.choice(KINDS)}"
    if r < 0.85:
        t2 = rng.choice([x for x in TRADES if x != t])
        return f"{s} {t} {t2} {rng.choice(KINDS)}"
    return f"{s}-{rng.choice(surnames)} {t}"


def typo(name):
    words = name.split(" ")
    at = rng.choice([i for i, w in enumerate(words) if sum(c.isalpha() for c in w) >= 3])
    w = list(words[at])
    letters = "abcdeghiklmnorstuvy"
    for _ in range(rng.choice([1, 1, 2])):
        op = rng.randrange(4)
        i = rng.randrange(1, len(w))  # keep the first letter, as most misspellings do
        if op == 0:
            w.insert(i, rng.choice(letters))
        elif op == 1 and len(w) > 3:
            del w[i]
        elif op == 2:
            w[i] = rng.choice([c for c in letters if c != w[i]])
        elif i + 1 < len(w):
            w[i], w[i + 1] = w[i + 1], w[i]
        else:
            w[i] = rng.choice([c for c in letters if c != w[i]])
    words[at] = "".join(w)
    return " ".join(words)


def case(name):
    r = rng.random()
    if r < 0.4:
        return name.upper()
    if r < 0.7:
        return name.lower()
    words = name.split(" ")
    at = rng.choice([i for i, w in enumerate(words) if w != w.lower()] or [0])
    words[at] = words[at].lower()
    return " ".join(words)


def swap(name):
    words = name.split(" ")
    if rng.random() < 0.6:
        words = words[1:] + words[:1]
    else:
        i, j = rng.sample(range(len(words)), 2)
        words[i], words[j] = words[j], words[i]
    return " ".join(words)


def drop(name):
    words = name.split(" ")
    del words[rng.randrange(len(words))]
    return " ".join(words)


def suffix(name):
    return name + rng.choice(SUFFIXES)


def punct(name):
    own = [c for c in name if not (c.isalnum() or c.isspace())]
    r = rng.random()
    if own and r < 0.3:
        # The name's own punctuation dropped ("Keth's" -> "Keths", "A & B" -> "A B").
        return " ".join("".join(c for c in name if c.isalnum() or c.isspace()).split())
    words = name.split(" ")
    if r < 0.6:
        i = rng.randrange(len(words) - 1)
        return " ".join(words[:i]) + (" " if i else "") + words[i] + "-" + " ".join(words[i + 1:])
    if r < 0.8:
        words[0] += ","
        return " ".join(words)
    return name + "."


MAKE = {"typo": typo, "case": case, "swap": swap, "drop": drop, "suffix": suffix,
        "punct": punct}


def main():
    surnames = sorted({word(rng.choice([1, 2, 2, 3])) for _ in range(1200)})
    firms = []
    forms = set()
    while len(firms) < FIRMS:
        name = firm_name(surnames)
        form = comparison_form(name)
        if form in forms:
            continue
        forms.add(form)
        firms.append(name)

    entries = []  # (name, firm number, kind)
    for f, name in enumerate(firms):
        entries.append((name, f, "original"))
        if rng.random() < 0.25:
            for kind in rng.sample(VARIANT_KINDS, rng.choice([1, 1, 1, 2, 3])):
                if kind == "drop" and len(name.split(" ")) < 3:
                    kind = "swap"
                for _ in range(20):
                    v = MAKE[kind](name)
                    # A variant that reads as another firm's name would be a different firm.
                    if v != name and (comparison_form(v) == comparison_form(name)
                                      or comparison_form(v) not in forms):
                        if kind == "swap" and comparison_form(v) != comparison_form(name):
                            continue
                        entries.append((v, f, kind))
                        break
    rng.shuffle(entries)

    with open(os.path.join(HERE, "traders.csv"), "w", encoding="utf-8", newline="") as out:
        w = csv.writer(out, lineterminator="\n")
        w.writerow(["code", "name", "island"])
        truth = []
        for i, (name, f, kind) in enumerate(entries):
            code = f"T{i + 1:05d}"
            w.writerow([code, name, ISLANDS[(f * 7) % len(ISLANDS)]])
            truth.append((code, f"F{f + 1:04d}", kind))
    with open(os.path.join(HERE, "traders-truth.csv"), "w", encoding="utf-8",
              newline="") as out:
        w = csv.writer(out, lineterminator="\n")
        w.writerow(["code", "firm", "kind"])
        for row in sorted(truth):
            w.writerow(row)


if __name__ == "__main__":
    main()
