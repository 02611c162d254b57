#!/usr/bin/env python3
"""Writes the demo data for the metrics other than edit distance on names, all invented
(fixed seed, byte-for-byte identical output on every run; Python 3 standard library only):

    buoys.csv             3,000 daily readings of 40 Vessmark weather buoys (8 numbers, header)
    buoy-queries.csv      200 readings to match against them (no header)
    ferries.txt           the ferry and road network as an edge list `stop stop minutes`
    ferry-queries.txt     100 stops to find the nearest stops of
    tags.txt              6,000 register entries as tag sets, one entry per line
    tag-queries.txt       200 tag sets with a tag added, dropped or changed
    barcodes.txt          10,000 twelve-base sample barcodes of the marine survey
    barcode-reads.txt     500 reads of them with 1-2 substitutions
    barcodes.fa           the barcodes as FASTA records named by survey plate and well
    barcode-reads.fq      the reads as FASTQ records, with run names and quality strings
    nucleotide-costs.txt  an edit cost file: transitions cheaper than transversions
"""
import math
import os
import random

HERE = os.path.dirname(os.path.abspath(__file__))
rng = random.Random(4099)

ISLANDS = ["Vessa", "Orthmere", "Kaldra", "Tessun", "Brinholm", "Skerrow", "Hvallan",
           "Mirrowey", "Dunsgale"]
SYL = ["ka", "ve", "thi", "or", "ska", "lun", "bre", "hol", "my", "dra", "sen", "tu",
       "gla", "rik", "ve", "ost", "ha", "nel", "kvi", "sto"]


def write(name, lines):
    with open(os.path.join(HERE, name), "w", encoding="utf-8", newline="\n") as f:
        for line in lines:
            f.write(line + "\n")


def buoys():
    header = "wave_m,period_s,wind_ms,gust_ms,air_c,sea_c,pressure_dev_hpa,salinity_psu"
    sites = []
    for _ in range(40):
        exposed = rng.random()
        sites.append((0.4 + 2.5 * exposed, 5 + 5 * exposed, 4 + 8 * exposed,
                      6 + 3 * rng.random(), 8 + 4 * rng.random(), 30 + 5 * rng.random()))
    rows = []
    for day in range(3000 // 40):
        season = math.sin(2 * math.pi * day / 75)
        storm = max(0.0, rng.gauss(0, 1)) * 1.5
        for wave, period, wind, air, sea, sal in sites:
            w = max(0.1, wave * (1 + 0.3 * storm) + rng.gauss(0, 0.2))
            p = max(2.0, period + 0.8 * storm + rng.gauss(0, 0.5))
            v = max(0.0, wind * (1 + 0.4 * storm) + rng.gauss(0, 1.0))
            g = v * (1.3 + 0.2 * rng.random())
            a = air + 6 * season + rng.gauss(0, 1.2)
            s = sea + 3 * season + rng.gauss(0, 0.4)
            pr = -12 * storm + rng.gauss(0, 4)
            sa = sal + rng.gauss(0, 0.3)
            rows.append(",".join(f"{x:.2f}" for x in (w, p, v, g, a, s, pr, sa)))
    write("buoys.csv", [header] + rows)
    queries = []
    for _ in range(200):
        r = [float(x) for x in rng.choice(rows).split(",")]
        r = [x + rng.gauss(0, 0.05 * (abs(x) + 1)) for x in r]
        queries.append(",".join(f"{x:.2f}" for x in r))
    write("buoy-queries.csv", queries)


def ferries():
    stops = []
    names = set()
    for i, island in enumerate(ISLANDS):
        cx, cy = 40 * (i % 3), 40 * (i // 3)
        for _ in range(rng.randint(25, 45)):
            while True:
                n = "".join(rng.choice(SYL) for _ in range(rng.choice([2, 3]))).capitalize()
                n = f"{island}-{n}"
                if n not in names:
                    break
            names.add(n)
            stops.append((n, island, cx + rng.uniform(0, 25), cy + rng.uniform(0, 25)))
    lines = ["# Vessmark ferry and road legs: stop, stop, minutes"]
    by_island = {}
    for s in stops:
        by_island.setdefault(s[1], []).append(s)
    for island in ISLANDS:
        group = by_island[island]
        for a in group:
            near = sorted(group, key=lambda b: (a[2] - b[2]) ** 2 + (a[3] - b[3]) ** 2)[1:4]
            for b in near:
                if a[0] < b[0]:
                    d = math.hypot(a[2] - b[2], a[3] - b[3])
                    lines.append(f"{a[0]} {b[0]} {round(2 + 3 * d)}")
        # Every island's stops are connected: chain them in x order as well.
        chain = sorted(group, key=lambda s: s[2])
        for a, b in zip(chain, chain[1:]):
            d = math.hypot(a[2] - b[2], a[3] - b[3])
            lines.append(f"{a[0]} {b[0]} {round(4 + 3 * d)}")
    for i in range(len(ISLANDS)):
        for j in range(i + 1, len(ISLANDS)):
            if abs(i % 3 - j % 3) + abs(i // 3 - j // 3) == 1 or rng.random() < 0.1:
                a = rng.choice(by_island[ISLANDS[i]])
                b = rng.choice(by_island[ISLANDS[j]])
                lines.append(f"{a[0]} {b[0]} {rng.randint(35, 120)}")
    write("ferries.txt", lines)
    write("ferry-queries.txt", [s[0] for s in rng.sample(stops, 100)])


TAGS = ["harbour", "fuel", "crane", "slipway", "chandlery", "winter-closed", "ferry-stop",
        "post-office", "school", "chapel", "smokehouse", "net-loft", "boatyard", "inn",
        "lighthouse", "pier", "fish-market", "ice-house", "rope-walk", "customs", "pilot",
        "rescue-station", "weather-mast", "kelp-store", "salt-store", "bakery", "forge",
        "tide-gauge", "mooring", "bunkhouse"]


def tags():
    entries = []
    for _ in range(6000):
        island = rng.choice(ISLANDS).lower()
        k = rng.randint(2, 7)
        entries.append(" ".join(sorted({island} | set(rng.sample(TAGS, k)))))
    write("tags.txt", entries)
    queries = []
    for _ in range(200):
        t = rng.choice(entries).split()
        op = rng.random()
        if op < 0.34 and len(t) > 2:
            t.remove(rng.choice(t[1:]))
        elif op < 0.67:
            t.append(rng.choice(TAGS))
        else:
            t[rng.randrange(len(t))] = rng.choice(TAGS)
        queries.append(" ".join(sorted(set(t))))
    write("tag-queries.txt", queries)


def barcodes():
    seen = set()
    codes = []
    while len(codes) < 10000:
        c = "".join(rng.choice("ACGT") for _ in range(12))
        if c not in seen:
            seen.add(c)
            codes.append(c)
    write("barcodes.txt", codes)
    reads = []
    for _ in range(500):
        c = list(rng.choice(codes))
        for p in rng.sample(range(12), rng.choice([1, 1, 2])):
            c[p] = rng.choice([b for b in "ACGT" if b != c[p]])
        reads.append("".join(c))
    write("barcode-reads.txt", reads)
    sequence_files(codes, reads)
    write("nucleotide-costs.txt", [
        "# Vessmark marine survey: edit costs between bases",
        "# transitions (A<->G, C<->T) are more frequent read errors than transversions",
        "indel * 1.5",
        "sub * * 1",
        "sub A G 0.5",
        "sub C T 0.5",
    ])


def sequence_files(codes, reads):
    """The barcodes and reads again as FASTA and FASTQ records. A generator of its own, so
    that the files written before these keep their bytes."""
    srng = random.Random(6151)
    records = []
    for i, c in enumerate(codes):
        plate, well = divmod(i, 96)
        records.append(f">bc{i + 1:05d} plate{plate + 1}:{'ABCDEFGH'[well // 12]}{well % 12 + 1}")
        records.append(c)
    write("barcodes.fa", records)
    records = []
    for i, r in enumerate(reads):
        station = srng.choice(ISLANDS)
        tile = srng.randint(1, 24)
        # Phred+33 qualities: mostly high, falling towards the end of the read.
        qual = "".join(chr(33 + max(2, min(40, int(srng.gauss(36 - 1.2 * p, 3)))))
                       for p in range(len(r)))
        records += [f"@vsm-run7:{i + 1:04d}:{tile} station={station}", r, "+", qual]
    write("barcode-reads.fq", records)


if __name__ == "__main__":
    buoys()
    ferries()
    tags()
    barcodes()
