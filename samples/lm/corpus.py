"""A generator of text in an invented setting, the corpus of the sample language models.

The growers of the terraced orchards on the island of Vell keep short logbooks: where they
worked, what the weather did, what they picked, mended or planted, and who came by. Every
place, person and plant here is made up for this project; the text is assembled from the
templates below by a seeded generator, so the corpus is the same on every machine and nothing
is copied from anywhere.

    python3 samples/lm/corpus.py --seed 1 --lines 20000 > corpus.txt
"""

import argparse
import random
import sys

PLACES = ["Brindle Terrace", "Hollow Reach", "the Saltwick rows", "Upper Corrow",
          "the Lantern Steps", "Marrow Point", "the east hedge", "Tamsel Gardens",
          "the old press yard", "Quill Hill", "the lower bank", "Fenby Cross"]
PEOPLE = ["Marit", "Oswin", "Tella", "Brannock", "Ysolde", "Pim", "Harl", "Cressa",
          "Dovey", "Anselm", "Ruth", "the Kesh twins"]
CROPS = ["quince", "amberpear", "lantern plum", "sloe", "medlar", "greengage", "russet apple",
         "bitter cherry", "hedge fig", "saltberry"]
WEATHER = ["a dry wind from the sea", "fog until noon", "steady rain", "a hard frost",
           "warm sun all day", "gusts that rattled the netting", "thin drizzle",
           "a grey, still sky", "hail for a quarter of an hour", "a bright cold morning"]
TASKS = ["pruned the {crop} rows", "mended the netting over the {crop}",
         "cleared the ditch below {place}", "grafted six {crop} whips",
         "spread mulch around the young {crop} trees", "checked the traps along {place}",
         "tied in the {crop} espaliers", "oiled the press", "counted the beehives at {place}",
         "cut back bramble at {place}", "carried water up to {place}",
         "sorted last week's {crop} into the cool store"]
PESTS = ["wasps in the {crop}", "leaf curl on the {crop}", "blackbirds at the {crop}",
         "mildew on the lower {crop} leaves", "a fox in the press yard", "snails after the rain"]
VISITS = ["{person} came by to trade {n} jars of honey for {crop} cuttings",
          "{person} asked about the price of {crop} at the Fenby market",
          "{person} brought news that the ferry will run late this week",
          "{person} borrowed the long ladder and the good shears",
          "{person} helped for the afternoon and stayed for supper"]
ENDINGS = ["Tomorrow: {task}.", "Need more twine.", "The cellar smells of {crop} again.",
           "Rest tomorrow if the weather holds.", "Must write to {person} about the cuttings.",
           "Picked {n} crates in all.", "Nothing else to note."]


def fill(template, rng):
    crop, place, person = rng.choice(CROPS), rng.choice(PLACES), rng.choice(PEOPLE)
    return template.format(crop=crop, place=place, person=person, n=rng.randint(2, 40),
                           task=rng.choice(TASKS).format(crop=crop, place=place))


def entry(rng, day):
    """One logbook entry: a heading, then three to five sentences."""
    parts = [f"Day {day} at {rng.choice(PLACES)}: {rng.choice(WEATHER)}."]
    worker = rng.choice(PEOPLE)
    parts.append(f"{worker} {fill(rng.choice(TASKS), rng)}.")
    if rng.random() < 0.5:
        parts.append(f"We picked {rng.randint(2, 40)} crates of {rng.choice(CROPS)}.")
    if rng.random() < 0.4:
        parts.append(f"Saw {fill(rng.choice(PESTS), rng)}.")
    if rng.random() < 0.4:
        parts.append(fill(rng.choice(VISITS), rng) + ".")
    parts.append(fill(rng.choice(ENDINGS), rng))
    return " ".join(parts)


def generate(seed, lines):
    """`lines` logbook entries, one per line, the same for the same seed."""
    rng = random.Random(seed)
    day = 1
    out = []
    for _ in range(lines):
        out.append(entry(rng, day))
        day = day + 1 if day < 365 else 1
    return "\n".join(out) + "\n"


def main(argv=None):
    parser = argparse.ArgumentParser(description="Write the orchard logbook corpus.")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--lines", type=int, default=20000)
    args = parser.parse_args(argv)
    sys.stdout.write(generate(args.seed, args.lines))
    return 0


if __name__ == "__main__":
    sys.exit(main())
