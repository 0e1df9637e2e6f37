#!/usr/bin/env python3
"""Generate the invented demo corpus in data/demo/.

Every document is composed here from invented fragments: messages sent to the
customer desk of Hollowmere Valley Cooperative, a made-up rural water-and-power
cooperative.  Each message is routed to one of seven teams (the label).

The output is deterministic: one seeded ``random.Random`` drives everything, and
no step depends on set ordering or string hashing, so two runs with the same
arguments write byte-identical files.

    python scripts/make_demo.py [--out data/demo] [--seed N] [--documents 6000]

Standard library only.
"""

from __future__ import annotations

import argparse
import csv
import json
import random
import re
import shutil
from pathlib import Path

DEFAULT_SEED = 20261202
DEFAULT_DOCUMENTS = 6000

# Labels with their share of the corpus (largest ~30%, smallest ~3.5%).
LABELS = [
    ("billing", 0.300),
    ("outage", 0.220),
    ("meter_reading", 0.150),
    ("account_access", 0.120),
    ("new_connection", 0.100),
    ("water_quality", 0.075),
    ("tree_and_line_clearance", 0.035),
]

SPLITS = [("train", 0.8), ("dev", 0.1), ("test", 0.1)]
SAMPLE_PER_LABEL = 10

# Knobs that set how hard the task is.
MIXED_RATE = 0.075  # messages that raise two teams' topics
COIN_FLIP_SHARE = 0.35  # of those, the label is a coin flip between the two teams
VAGUE_RATE = 0.25  # messages whose core sentence carries only a faint cue
TYPO_RATE = 0.03  # per eligible word

# --------------------------------------------------------------------------
# Template mini-language
#   [a|b|c]  pick one alternative (may nest; an empty alternative is allowed)
#   {slot}   filled by a slot generator, fresh on every occurrence
# --------------------------------------------------------------------------

_CHOICE = re.compile(r"\[([^\[\]]*)\]")
_SLOT = re.compile(r"\{(\w+)\}")
_SPACE_PUNCT = re.compile(r" +([.,;:?!])")


class Composer:
    """Expands templates with a private random stream and invented name pools."""

    def __init__(self, rng: random.Random):
        self.rng = rng
        self.villages = _unique(rng, make_village, 70)
        self.streets = _unique(rng, make_street, 220)
        self.surnames = _unique(rng, make_surname, 900)
        self.given = _unique(rng, make_given_name, 700)
        # Zipf-like weights: a few places crop up constantly, most rarely.
        self.village_w = [1.0 / (i + 1) ** 0.9 for i in range(len(self.villages))]
        self.street_w = [1.0 / (i + 1) ** 0.7 for i in range(len(self.streets))]
        self.surname_w = [1.0 / (i + 1) ** 0.5 for i in range(len(self.surnames))]
        self.given_w = [1.0 / (i + 1) ** 0.6 for i in range(len(self.given))]

    def pick(self, items):
        return items[self.rng.randrange(len(items))]

    def expand(self, template: str) -> str:
        text = template
        while True:
            new = _CHOICE.sub(lambda m: self.pick(m.group(1).split("|")), text, count=1)
            if new == text:
                break
            text = new
        text = _SLOT.sub(lambda m: self.slot(m.group(1)), text)
        return _SPACE_PUNCT.sub(r"\1", text).replace("  ", " ")

    def slot(self, name: str) -> str:
        if name in WORDS:
            return self.expand(self.pick(WORDS[name]))
        return getattr(self, "slot_" + name)()

    # -- slot generators producing the long tail ---------------------------
    def slot_village(self):
        return self.rng.choices(self.villages, self.village_w)[0]

    def slot_street(self):
        return self.rng.choices(self.streets, self.street_w)[0]

    def slot_first(self):
        return self.rng.choices(self.given, self.given_w)[0]

    def slot_name(self):
        first, last = self.slot_first(), self.rng.choices(self.surnames, self.surname_w)[0]
        r = self.rng.random()
        if r < 0.12:
            return f"{first[0]}. {last}"
        if r < 0.2:
            return f"{self.pick(['Mr', 'Mrs', 'Ms', 'Dr', 'Mx'])} {last}"
        return f"{first} {last}"

    def slot_addr(self):
        r = self.rng.random()
        n = self.rng.randint(1, 140)
        if r < 0.55:
            return f"{n} {self.slot_street()}, {self.slot_village()}"
        if r < 0.75:
            return f"{n} {self.slot_street()}"
        if r < 0.9:
            return f"{self.slot('house')}, {self.slot_village()}"
        return f"{self.slot('house')} on {self.slot_street()}"

    def slot_acct(self):
        n = self.rng.randint(10000, 99999)
        return self.pick([f"HV-{n}", f"HV-{n}", f"HV{n}", f"HV-{n:07d}", f"HV {n}", f"{n}"])

    def slot_meter(self):
        n, c = self.rng.randint(1000, 9999), self.pick("ABCDEFGHKLMNPRTW")
        return self.pick([f"MTR {n}-{c}", f"MTR-{n}{c}", f"meter {n}-{c}", f"MTR{n}/{c}"])

    def slot_wo(self):
        n = self.rng.randint(1000, 99999)
        return self.pick([f"WO-{n}", f"work order {n}", f"job ref JB/{n}", f"WO{n}", f"application AP-{n}"])

    def slot_fault(self):
        return f"OUT-{self.rng.randint(2401, 2612)}-{self.rng.randint(1, 999):03d}"

    def slot_amount(self):
        v = self.rng.choice([self.rng.randint(18, 140), self.rng.randint(90, 620), self.rng.randint(400, 2400)])
        cents = self.rng.randint(0, 99)
        return self.pick([f"€{v}.{cents:02d}", f"€{v}", f"{v} euro", f"{v}.{cents:02d} euro", f"€ {v}.{cents:02d}"])

    def slot_reading(self):
        n = self.rng.randint(0, 99999)
        return self.pick([f"{n:05d}", f"{n:05d}", f"{n} kWh", f"{n % 9000} m3", f"{n:06d}"])

    def slot_n(self):
        return str(self.rng.randint(2, 40))

    def slot_nth(self):
        d = self.rng.randint(1, 28)
        suffix = "th" if 10 <= d <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(d % 10, "th")
        return f"{d}{suffix}"

    def slot_date(self):
        r = self.rng.random()
        if r < 0.35:
            return f"the {self.slot_nth()} of {self.slot('month')}"
        if r < 0.6:
            return f"{self.rng.randint(1, 28)}/{self.rng.randint(1, 12):02d}"
        return self.expand("[last {day}|{day}|{day} just gone|the {nth}|the weekend|yesterday|the day before yesterday|last week]")

    def slot_time(self):
        r = self.rng.random()
        if r < 0.4:
            return f"{self.rng.randint(0, 23):02d}:{self.pick(['00', '05', '10', '15', '20', '30', '40', '45', '50'])}"
        if r < 0.7:
            return f"{self.rng.randint(1, 12)}{self.pick(['am', 'pm', ' am', ' pm', 'ish'])}"
        return self.expand("[midnight|teatime|lunchtime|first thing|about half six|just after nine|dawn|supper time|around four]")

    def slot_phone(self):
        return f"0{self.rng.randint(1200, 1999)} {self.rng.randint(100, 999)} {self.rng.randint(100, 999)}"

    def slot_email(self):
        return f"{self.slot_first().lower()}.{self.rng.randint(1, 99)}@{self.pick(['valleymail', 'hollowpost', 'meremail', 'postbox'])}.example"


# --------------------------------------------------------------------------
# Invented names from syllables
# --------------------------------------------------------------------------

ONSETS = ["b", "br", "c", "ch", "d", "dr", "f", "fl", "g", "gl", "gr", "h", "k", "l", "m", "n", "p", "pr",
          "r", "s", "sk", "sl", "st", "t", "th", "tr", "v", "w", "wh", "wr", "y", "sp", "sw", "tw", "qu", "z"]
VOWELS = ["a", "e", "i", "o", "u", "a", "e", "o", "ai", "ea", "oo", "ow", "y", "ay", "ey", "au"]
CODAS = ["", "", "", "n", "l", "r", "m", "th", "nd", "rn", "ck", "ll", "st", "x", "rd", "lm", "nt", "sh",
         "ft", "ld", "mb", "ng", "rk", "rt", "sk", "v"]
LIGHT = ["", "", "", "le", "er", "en", "ing", "a", "i", "o", "el", "an"]  # optional second syllable
PLACE_ENDS = ["fold", "mere", "wick", "thorpe", "stead", "combe", "hithe", "well", "dale", "ridge", "holt",
              "ford", "ley", "worth", "den", "moor", "garth", "haven", "brook", "by", "shaw", "wold",
              "carr", "hope", "beck", "ness", "ling", "cote", "wyn", "sett"]
PLACE_TWO = ["Cross", "Green", "End", "Bottom", "Marsh", "Heath", "Hollow", "Bridge", "Common", "Row"]
STREET_TYPES = ["Lane", "Road", "Row", "Close", "Way", "Drove", "Hill", "Street", "Rise", "Court", "Walk",
                "Track", "Terrace", "Gardens", "Mews", "Yard", "Crescent", "Green", "Chase", "Loke"]
GIVEN_ENDS = ["a", "el", "in", "wen", "ric", "is", "o", "ette", "an", "ys", "ia", "or", "ine", "us", "ey",
              "iel", "onn", "ard", "id", "ara", "ith", "é", "ë"]
GIVEN_END_W = [6, 5, 5, 3, 3, 3, 3, 2, 5, 2, 3, 3, 2, 2, 2, 2, 1, 2, 2, 2, 2, 0.5, 0.5]
SURNAME_ENDS = ["wick", "mere", "dell", "cott", "wold", "ham", "rigg", "stone", "ling", "er", "hurst",
                "ward", "ings", "lock", "more", "thwaite", "en", "sey", "ett", "orne"]

# Strings that must never appear inside a generated name (lower-case).
_BLOCKED = ["porn", "sex", "fuck", "shit", "cunt", "nazi", "rape", "anal", "cock", "dick", "slut", "nig",
            "fag", "piss", "arse", "crap", "kill", "dead", "twat", "wank", "tit", "cum", "poo", "fart",
            "bum", "hell", "damn", "hore", "kkk", "isis", "gay", "jew", "spaz", "retard", "turd", "prick"]
# A few generated strings that happen to be real places or common names.
_REAL = ["torridge", "filby", "craven", "grantley", "nemo", "ashby", "wickham", "milton", "thorpe",
         "brook", "haven", "ford", "wells", "dale", "holt", "stone", "cotton", "rigby", "appleby",
         "twynham", "hursey", "bevis", "simbel", "pavia", "zaid", "cenis", "terridge"]
_AWKWARD = re.compile(r"(.)\1\1|[aeiouy]{3}|[^aeiouy\s]{4}|ë.|é.|aa|ii|uu|yi|wr[^aeiouy]")


def _acceptable(name: str) -> bool:
    low = name.lower()
    return (
        4 <= len(name) <= 14
        and not _AWKWARD.search(low)
        and not any(b in low for b in _BLOCKED)
        and not any(w == r for w in low.split() for r in _REAL)
    )


def _syllable(rng: random.Random, coda: bool = True) -> str:
    return rng.choice(ONSETS) + rng.choice(VOWELS) + (rng.choice(CODAS) if coda else "")


def make_village(rng: random.Random) -> str:
    stem = _syllable(rng) + rng.choice(LIGHT)
    r = rng.random()
    if r < 0.2:
        return stem.capitalize() + " " + rng.choice(PLACE_TWO)
    name = (stem + rng.choice(PLACE_ENDS)).capitalize()
    if r < 0.28:
        return rng.choice(["Upper", "Lower", "Little", "Nether", "Over"]) + " " + name
    return name


def make_street(rng: random.Random) -> str:
    stem = _syllable(rng) + rng.choice(LIGHT)
    if rng.random() < 0.25:
        stem += rng.choice(PLACE_ENDS)
    return stem.capitalize() + " " + rng.choice(STREET_TYPES)


def make_given_name(rng: random.Random) -> str:
    stem = _syllable(rng, coda=rng.random() < 0.5)
    if rng.random() < 0.3:
        stem += rng.choice(["l", "r", "v", "m", "n", "th", "d"]) + rng.choice(["a", "e", "i", "o"])
    return (stem + rng.choices(GIVEN_ENDS, GIVEN_END_W)[0]).capitalize()


def make_surname(rng: random.Random) -> str:
    return (_syllable(rng) + rng.choice(SURNAME_ENDS)).capitalize()


def _unique(rng: random.Random, maker, count: int) -> list[str]:
    seen, out = set(), []
    while len(out) < count:
        name = maker(rng)
        if name not in seen and _acceptable(name):
            seen.add(name)
            out.append(name)
    return out


# --------------------------------------------------------------------------
# Shared vocabulary (slot tables)
# --------------------------------------------------------------------------

WORDS = {
    "month": ["January", "February", "March", "April", "May", "June", "July", "August", "September",
              "October", "November", "December"],
    "day": ["Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday"],
    "bill": ["bill", "bill", "invoice", "statement", "quarterly bill", "latest bill"],
    "portal": ["the member portal", "the app", "my online account", "the website", "the Hollowmere app",
               "the self-service page", "the members' area"],
    "house": ["Rookery Cottage", "the Old Forge", "Mill House", "the Granary", "Top Barn", "Lower Croft",
              "the Old Schoolhouse", "Keeper's Lodge", "the Smithy", "Orchard View", "the Chapel House",
              "Pound Cottage", "the Tollhouse", "Sheepwash Farm", "the Coach House", "Stonebank", "the Dairy"],
    "landmark": ["the chapel", "the village café", "the old creamery", "the packhorse bridge", "the school",
                 "the bus shelter", "the war memorial", "the ford", "the allotments", "the cattle grid",
                 "the pub car park", "the recycling point", "the football pitch", "the village hall",
                 "the duck pond", "the garage", "the post box", "the sawmill", "the old quarry"],
    "appliance": ["fridge", "chest freezer", "heat pump", "milk cooler", "well pump", "kiln", "incubator",
                  "aquarium heater", "stairlift", "boiler", "electric fence", "router", "dehumidifier",
                  "bread oven", "sump pump", "CPAP machine", "storage heaters"],
    "tree": ["oak", "ash", "willow", "alder", "birch", "sycamore", "poplar", "conifer", "beech", "hawthorn",
             "horse chestnut", "leylandii", "elm", "cherry tree", "big lime tree", "hazel"],
    "relative": ["my daughter", "my son", "my husband", "my wife", "my partner", "my mother", "my father",
                 "my brother", "my sister", "my neighbour", "our lodger", "my aunt", "my grandson",
                 "my granddaughter", "the farm manager", "my tenant"],
    "animal": ["the dog", "the cats", "the goats", "the hens", "the ewes", "the pony", "the bees",
               "the ducks", "the alpacas", "the calves", "our old collie", "the geese", "the pigs"],
    "water_look": ["brown", "cloudy", "milky", "yellowish", "rusty", "murky", "orange", "grey", "greenish",
                   "the colour of weak tea", "full of grit", "sandy"],
    "water_smell": ["bleach", "chlorine", "rotten eggs", "metal", "earth", "the pond", "petrol", "damp",
                    "swimming pools", "mould", "sulphur", "diesel"],
    "duration": ["three hours", "two days", "most of the night", "a fortnight", "ten days",
                 "nearly a week", "six hours", "the whole weekend", "over a day", "forty minutes",
                 "most of the day", "four days now", "two hours"],
    "storm": ["the storm", "the gales", "Sunday's wind", "the heavy snow", "last night's thunderstorm",
              "the ice", "the flooding", "the big blow on {day}"],
}

# --------------------------------------------------------------------------
# Per-team fragments
#   issue:   sentences describing the problem (strong cues)
#   vague:   sentences with only a faint cue, often shared in tone with other teams
#   request: what the writer wants done
#   cause:   short clause used when this team's topic is the background of another's
# --------------------------------------------------------------------------

TEAMS = {
    "billing": {
        "issue": [
            "My {bill} [came to|is for|says I owe] {amount}, which is [way|far|a lot] more than [usual|normal|I normally pay].",
            "I've been charged twice for {month}[ and I can't see why|, again|].",
            "The direct debit [went out|was taken] [twice|early|on the wrong date|before the {bill} even arrived] this month.",
            "I paid {amount} [on|back on] {date} but the {bill} still shows it as outstanding.",
            "There's a late payment fee of {amount} on my account that I don't think is [fair|justified|right].",
            "I [want|need|would like] to [set up|arrange|talk about] a payment plan[ because money is tight this winter| as I've lost hours at work| until the harvest money comes in|].",
            "The standing charge [seems to have|has] [gone up|jumped|doubled] without any [notice|letter|warning].",
            "I'm on the [member|pensioner|smallholding|low-use] tariff but the {bill} shows the [standard|business|commercial] rate.",
            "My refund of {amount} [still hasn't arrived|was promised weeks ago|never came through].",
            "Can you explain the [line|charge] called \"[sundry adjustment|network levy|reconnection fee|balancing charge|admin uplift]\" on my {bill}?",
            "I [moved out of|left] {addr} on {date} but I'm still being billed for it.",
            "We got a [final demand|red letter|reminder|debt collection letter] for {amount} even though [we pay by direct debit|the account is in credit|it was paid in full].",
            "I'd like to [change|move] my direct debit date to the {nth} of the month.",
            "The [members' dividend|rebate|winter credit|solar export credit] [hasn't been applied|is missing] from this [quarter's|year's] {bill}.",
            "Why has my monthly payment [gone up|been raised|been increased] from {amount} to {amount}?",
            "My [card|bank transfer|standing order] [payment|] [bounced|failed|was declined] and now there's a [charge|penalty] for it.",
            "I need [copies|a duplicate] of my [bills|statements|invoices] for {month} [for my accountant|for a grant application|for the housing office|for the tax return].",
            "The water and power charges are on one {bill} but I [asked|requested] to have them [split|separated].",
            "I think I'm paying for [my neighbour's|someone else's|the next-door cottage's] supply.",
            "I've been charged for water at [the barn|the paddock trough|the workshop|the old dairy] which has been [disconnected|shut off] since {month}.",
            "The VAT on my {bill} looks [wrong|doubled|higher than it should be].",
            "My account shows a [debit|debt] of {amount} that I [don't recognise|can't account for|know nothing about].",
            "You've [taken|debited] {amount} from the wrong [bank account|account|card].",
            "I was told the [connection|reconnection|callout] fee would be waived but it's [on|been added to] my {bill}.",
            "[We're|I'm] in credit by {amount} and I'd like it [paid back|refunded|returned] please.",
            "The price per unit [on my|in the] {bill} doesn't match the [tariff|price list|letter] you sent in {month}.",
            "I can't afford the {amount} [in one go|all at once|this month] – can it be spread out?",
            "[The|My] {bill} [hasn't arrived|never came|didn't come] this [quarter|month] so I don't know what I owe.",
        ],
        "vague": [
            "Something doesn't [add up|look right] with what you've [taken|charged] this [month|time].",
            "The amount [is|seems|looks] wrong[ again|].",
            "The numbers on the letter you sent don't make sense to me.",
            "I [think|reckon] I've paid [too much|more than I should].",
            "I got a letter [with a figure on it|about money] I don't understand.",
            "It's [a lot|much] higher than last [year|time].",
            "Could someone explain the charges? I'm [confused|lost].",
        ],
        "request": [
            "Could you [look into|check] this and [refund the difference|correct it|let me know what I actually owe]?",
            "Please [send|email] me [a corrected|a revised|an itemised] {bill}.",
            "I'd like the [fee|charge|penalty] [removed|waived|reversed].",
            "Can someone from [billing|accounts|the accounts team] [call me back|ring me|get in touch]?",
            "Please [sort out|fix] the [payments|charges] and confirm in writing.",
            "I'd [appreciate|like] a [breakdown|full breakdown] of how this was [worked out|calculated].",
            "Please don't [pass this to debt collectors|cut us off] while it's [being sorted|under review].",
            "Let me know [the balance|what the balance is] once it's corrected.",
        ],
        "cause": [
            "my {bill} [jumped|shot up|doubled]",
            "I was charged {amount} [extra|more than usual]",
            "the {bill} came in at {amount}",
        ],
    },
    "outage": {
        "issue": [
            "[The power|Our electricity|The electric|Everything] [went off|cut out|died|tripped out] at {time}[ and it's still off| and hasn't come back| without any warning|].",
            "Half the [street|village|lane|hamlet] [has been|is] [without power|in the dark|off] since {time}.",
            "The lights keep [flickering|dimming|going off for a few seconds] [every evening|since {storm}|on and off all day].",
            "We've had [no|zero] [power|electricity|supply] for {duration} at {addr}.",
            "Is there a [known|planned] [outage|fault|power cut] in {village}? Nothing [works|is on] at our end.",
            "My {appliance} [stopped|packed in|shut down] when the power [went|dropped][ and nobody's said when it'll be back| and didn't restart|].",
            "Only [half|some] of the house has power[ – the kitchen is dead but upstairs works| – one phase seems to be down|].",
            "There was a [loud bang|flash|buzzing noise] from the [transformer|substation|pole box] near {landmark} and then [everything went dark|the power went].",
            "The planned [shutdown|outage|maintenance] was [supposed|meant] to [end|finish] at {time} but we're still off.",
            "I [rely on|use] a [home oxygen machine|stairlift|dialysis machine|medical fridge] so I need to know when the power will be back.",
            "[The water pump|Our well pump|The booster pump] has no power so we have no water [either|now|as well].",
            "The street lights on {street} [are all out|have been off for {duration}].",
            "The voltage [keeps dropping|is very low]; [bulbs are dim|the kettle takes ages|the TV keeps resetting].",
            "We've had no water [at all|coming out of the taps] since {time}[ – is there a burst main?|].",
            "[The supply|The power] has [gone off|cut out] [three|four|five] times [today|this week|since {day}].",
            "Your fault line [just rings out|says there's no known fault|keeps cutting off] but we've [still got no power|been off for {duration}].",
            "[A|The] main seems to have burst on {street}; water is [pouring|gushing] down the road and our taps are dry.",
            "Power went off across {village} at {time}; [is an engineer on the way|any idea how long|when will it be back]?",
            "[Still|STILL] no electricity at {addr} – fault ref {fault}.",
            "Is the [outage|power cut|shutdown] in {village} [going to last|expected to go on] [overnight|past the weekend|much longer]?",
            "The [trip switch|fuse] [is fine|hasn't tripped] – it's the whole [supply|line] that's [dead|off].",
            "The water came back [after the repair|on] but [went off again|is off again] [at|around] {time}.",
        ],
        "vague": [
            "Nothing's [working|on] here [again|at the moment|].",
            "We've been [left in the dark|cut off] [again|once more|].",
            "It's gone off [again|twice now] – what's going on?",
            "Is [anyone|someone] [aware|dealing with it]? We're [stuck|waiting] here.",
            "The whole [place|lane] is [dead|quiet] and no one's told us anything.",
            "Are you doing work [nearby|round here|in the area] today?",
        ],
        "request": [
            "When will it be [back on|restored|fixed]?",
            "Please [send|get] an engineer [out|round] as soon as you can.",
            "Can you give me an [estimated|rough] time for [reconnection|restoration|the repair]?",
            "Please [text|call] me when it's [back|restored].",
            "Is there any [compensation|help] for the [food|stock] we've lost?",
            "We need [a generator|someone] here [urgently|tonight].",
            "Please put us on the [priority|vulnerable customers] list.",
            "Any update would be [appreciated|a help].",
        ],
        "cause": [
            "the power went off for {duration}",
            "we lost power [overnight|on {day}|after {storm}]",
            "[the supply|the power] [dropped out|cut out] [twice|again]",
        ],
    },
    "meter_reading": {
        "issue": [
            "My meter [actually reads|shows|says] {reading} but the {bill} [used|was based on] {reading}.",
            "You've [estimated|guessed] my reading [again|for the third time|since {month}]; the real one is {reading}.",
            "[The|My] meter [display|screen] is [blank|showing dashes|stuck on \"ERR 4\"|flashing \"E-07\"|frozen].",
            "The [meter reader|reader] [didn't turn up|never came|couldn't get in] on {date}.",
            "I'd like to [submit|send|give you] my [meter|water meter|electric meter] reading: {reading}.",
            "My meter {meter} [was replaced|was swapped|was changed] on {date} and [I don't think the old reading was recorded|the start reading looks wrong|the new one isn't on my account].",
            "The [smart meter|new meter|remote meter] [isn't sending|stopped sending] readings[ since {month}|].",
            "The [water meter|meter] [is spinning|keeps ticking over] even when every tap is off.",
            "The meter [cupboard|box|chamber] [is|has been] [flooded|broken|overgrown|locked|buried under gravel] so [no one can read it|I can't read it].",
            "Can you [move|relocate] the meter [outside|to the gate] so the reader doesn't [have to come|need to come] in [past the dogs|through the yard|past the bull]?",
            "The serial number on my meter doesn't match the one on my [account|paperwork|{bill}].",
            "I think [my meter|the meter] is [running fast|faulty|over-recording|sticking] and I want it [tested|checked|calibrated].",
            "Here's my reading for {month}: {reading} ({meter}).",
            "[The|A] reading of {reading} [was entered|was recorded] for me but that's [impossible|not what the dial says|higher than the meter even shows].",
            "My [day|night|economy] and [night|day|standard] readings [look swapped|have been mixed up|are the wrong way round].",
            "I can't find my meter – [is it|I think it's] [under the hedge|in the verge|in the neighbour's garden|under the cattle grid]?",
            "[The|My] meter has [a cracked glass|condensation inside|a broken seal] and I can't read the [dials|numbers].",
            "The app won't [accept|take] my reading of {reading}; it says it's \"[too high|out of range|invalid]\".",
            "A [man|woman|contractor] came to read the meter without [ID|a badge] – was that really one of yours?",
            "[I've|We've] had three estimated readings in a row for {meter}.",
        ],
        "vague": [
            "The numbers you have for me don't look right.",
            "I don't think the [figures|numbers] you've got are [real|accurate].",
            "Nobody's [been out|come round] for [ages|months] to check.",
            "Can someone come and have a look at the [box|unit] on the wall?",
            "I sent you [the numbers|my figures] and nothing changed.",
            "Whatever you've [got down|recorded] for me is [off|not right].",
        ],
        "request": [
            "Please [update|correct] the reading and [reissue|redo] the {bill}.",
            "Can you [send someone|book a visit] to [read|check|test] the meter?",
            "Please [use|take] my reading instead of the estimate.",
            "Could you confirm you've [received|logged] the reading?",
            "Please [book|arrange] a meter [test|accuracy check|exchange].",
            "Let me know [a date|when] the reader will [come|be in the area].",
        ],
        "cause": [
            "[my|the] meter was [replaced|swapped] on {date}",
            "the reading was [estimated|guessed] [again|for months|three times running]",
            "the meter [display went blank|stopped working]",
        ],
    },
    "new_connection": {
        "issue": [
            "We're [building|finishing|renovating] a [house|barn conversion|workshop|cabin|holiday let] [at|on] {addr} and need a new [water|power|electricity] connection.",
            "How long does it take to get a [new supply|connection] to a [plot|field|new build|self-build] [outside|near] {village}?",
            "I'd like a quote for [connecting|running power to|running water to] [a polytunnel|a caravan pitch|a farm shop|a garden studio|an electric car charger|a new cattle shed].",
            "We've [bought|taken over|inherited] {addr} and need the supply [switched on|reconnected|installed] – it's been empty for years.",
            "The [trench|ducting] is dug; when can your [crew|engineer|team] [come and lay the cable|make the connection|lay the pipe]?",
            "Do I need [planning permission|a wayleave|a surveyor] before you [connect|can connect] [the plot|us|the site]?",
            "Can the supply be [upgraded|increased] to [three-phase|a bigger fuse|100 amps] for [the new workshop|a heat pump|the milking parlour|a kiln]?",
            "Our [application|request|quote request] {wo} has been [pending|sitting there] for {duration}[ with no reply|].",
            "We [want|would like] to [join|become members of] the cooperative and get [connected|a supply].",
            "We need a temporary [builder's supply|site supply] for [the build|about six months|the summer|a year or so].",
            "Where should the [meter box|kiosk|stopcock] go on the new [build|house|barn]? The [builder|architect] is asking.",
            "The quote you sent for [the connection|{wo}] [is much higher than|has doubled from] the estimate – can it be [reviewed|rechecked]?",
            "We'd like to [add|fit] [solar panels|a wind turbine|a battery] and [connect|export] to the grid.",
            "We're [splitting|dividing] {addr} into two [flats|units|cottages] and each needs its own supply.",
            "Could you [survey|look at] the route for a new [pipe|cable] across [the lower field|the orchard|the common] to {house}?",
            "[The|Our] connection [date|appointment] for {wo} was [cancelled|moved] [twice|again]; when is it now?",
            "We need a [new|second] water connection for [stock troughs|the campsite showers|a new dairy].",
            "The developer [says|told us] you [still need to sign off|haven't approved] the [connection|meter position] for plot {n}.",
        ],
        "vague": [
            "We're [putting up|building] something new [on the land|behind the house] and [need|will need] you [involved|out].",
            "How [do I|does one] get [set up|started] with you?",
            "We're new to the valley[ and don't know how it works here|].",
            "What are the [steps|costs] for getting [going|hooked up]?",
            "The builders are asking when you can come [out|round].",
        ],
        "request": [
            "Please send [an application form|the paperwork|a quote|a price].",
            "Can you [book|arrange] a site visit?",
            "What [information|drawings|documents] do you need from us?",
            "Please let me know the [cost|lead time|next steps].",
            "Can someone [ring|call] me to talk it through?",
            "We'd like it [done|connected] before [the end of {month}|we move in|the tenants arrive].",
        ],
        "cause": [
            "the new [connection|supply] went in at {addr}",
            "you [connected|hooked up] the new [barn|workshop|cabin]",
            "[our|the] new supply was [switched on|installed] in {month}",
        ],
    },
    "water_quality": {
        "issue": [
            "The water from the [kitchen|bathroom|cold|garden] tap is {water_look}.",
            "Our water [smells|tastes] [of {water_smell}|odd|funny|strange].",
            "There are [black|white|orange|tiny] [bits|flakes|specks] in the [water|kettle|bath].",
            "Is there a boil-water notice for {village}? [The water looks|Our water is] {water_look}.",
            "[Since|After] the [works|repair|digging] on {street}, the water [has been|is] [discoloured|murky|{water_look}].",
            "[My children|The kids|Our guests|My grandchildren] [got|have been] [sick|poorly|an upset stomach] and I'm worried it's the water.",
            "The water [leaves|has left] a [green|blue|white|brown] [stain|ring|crust] on the [sink|bath|kettle|toilet].",
            "Is the water [safe|OK|fit] to drink? It [looks|has looked|tastes] [strange|off|{water_look}] since {date}.",
            "Can you [test|sample] the water at {addr}?",
            "The [cattle|sheep|hens|horses|goats] [won't drink|are refusing] the water from the trough.",
            "The water is full of [bubbles|air] and goes [white|milky] in the glass.",
            "The water [pressure|flow] [is very low|is just a trickle|has dropped] and what does come out is {water_look}.",
            "I have a [filter|water softener] and it's [clogging|turning black] in [days|a week].",
            "[The|Our] [kettle|coffee|tea] tastes [of {water_smell}|metallic|awful] [since|after] {date}.",
            "The hot water is fine but the cold [smells|tastes] of {water_smell}.",
            "We had the [pipes|water] [checked|tested] privately and [lead|nitrate|bacteria] levels came back high.",
            "There's a [film|sheen|scum] on top of [the water|a glass of water] when it's left to stand.",
            "The [café|tea room|B&B|bakery] needs to know if the water is [safe|OK] for [customers|guests] today.",
        ],
        "vague": [
            "Something's not right with what's coming out of the taps.",
            "I don't [trust|like] [it|the stuff coming through] [at the moment|since {day}].",
            "It [doesn't seem|isn't] [right|normal] [again|lately].",
            "Has [anyone else|anybody] [complained|noticed]? It's [been|gone] [odd|funny] since {date}.",
            "We've been [buying bottled|using bottled] [just in case|for now].",
        ],
        "request": [
            "Please [send someone|arrange a test|come and take a sample].",
            "Can you tell me whether it's safe for [a baby|my animals|cooking|drinking]?",
            "Please let me know [what's caused it|what's going on|if there's a notice].",
            "Should I [run the taps|boil it|stop using it] until you've checked?",
            "Could you [flush|clean] the main on our road?",
            "I'd like the [results|test results] sent to me.",
        ],
        "cause": [
            "the water [turned|went] {water_look}",
            "the water [smelt|tasted] of {water_smell}",
            "the water [looked|was] {water_look} for a [day|few days]",
        ],
    },
    "tree_and_line_clearance": {
        "issue": [
            "A [branch|tree|big limb] is [resting on|touching|leaning on] the [power line|overhead line|wires] [on|along] {street}.",
            "The [trees|hedge|willows|conifers] along {street} [have grown|are growing] [into|right up to|through] the lines.",
            "[When|Whenever] it's windy the branches [rub|scrape|slap] against the wires and [spark|crackle|hiss].",
            "Can your [crew|contractors|tree surgeons] [trim|cut back|lop] the {tree} [by|near] {landmark} before [it brings the line down|winter|the next storm]?",
            "Your contractors [cut back|felled|trimmed] [trees|hedges] on our land and left [a mess|the brash|the logs|ruts in the field] [everywhere|behind|in the field].",
            "The pole [is leaning|has tilted|is rotten at the base] [badly|over the lane|after {storm}|].",
            "There's [ivy|a creeper|a climbing rose|bramble] [growing up|all over] the [pole|stay wire].",
            "I want to [fell|take down|pollard] a {tree} [next to|close to|under] the lines; can you [make it safe|switch off|send someone]?",
            "A line is [sagging|hanging low] [over|across] [the track|the field|the yard] and [the tractor|the hay lorry|the school bus] can't [get under|pass under] it.",
            "When are you doing the [annual|next] [clearance|vegetation] work in {village}?",
            "A {tree} came down in {storm} and is [lying across|tangled in|propped against] the wires [by|near] {landmark}.",
            "The [cables|wires] to our house go [straight|right] through the {tree} and it's [growing fast|got huge].",
            "I [don't want|object to] your [contractors|crew] cutting the {tree} [on|at] {addr} – it's [protected|in a conservation area|full of nesting birds].",
            "There's a [wire|cable] [down|on the ground] [in the field|by the gate|across the footpath] near {landmark}.",
            "Birds have built a nest on top of the [pole|transformer] [by|near] {landmark}.",
            "The [stay wire|guy wire] on the pole [by|near] {landmark} has [snapped|come loose] and [it's swinging|the pole is moving].",
        ],
        "vague": [
            "There's [something|a lot of growth] [up by|around] the [wires|poles] that [needs|wants] looking at.",
            "It's [getting|grown] [really|very] [overgrown|wild] round the [poles|lines] here.",
            "After {storm} things look [dangerous|dodgy] up [by|on] the [lane|hill].",
            "Who [do I|should I] [ask|speak to] about [cutting|clearing] stuff [back|away] [near|around] your [equipment|poles]?",
        ],
        "request": [
            "Please [send someone|get a crew out] to [cut it back|make it safe|have a look].",
            "Can you [book|schedule] the [clearance|trimming|cutting] [soon|before winter|this month]?",
            "Please [let me know|tell me] who [is responsible|pays] for the [cutting|clear-up].",
            "Please [come and|] clear up the [mess|brash|logs] you left.",
            "Could you [switch off|isolate] the line while we [fell it|do the work]?",
            "Please don't [cut|touch] it until we've [talked|spoken].",
        ],
        "cause": [
            "a {tree} [came down|fell] on the line [by|near] {landmark}",
            "branches [brought down|took out] the [wires|line] on {street}",
            "[a|the] pole [snapped|went over] in {storm}",
        ],
    },
    "account_access": {
        "issue": [
            "I can't [log in to|sign in to|get into|log into] {portal}[ since the update| since {day}| on my phone|].",
            "The password reset email [never arrives|isn't coming through|goes nowhere|lands in spam and the link has expired].",
            "My [online account|login] [is|has been] [locked|blocked|suspended] after [too many attempts|three tries|I mistyped my password].",
            "I [changed my|have a new|got a new] [email address|phone number|mobile] and now the [verification|security|login] code goes to the old one.",
            "{portal} [says|keeps saying] \"[invalid credentials|account not found|session expired|something went wrong|user already exists]\"[ every time|].",
            "[My husband|My late wife|My mother|My partner|My late father] [handled|ran|held] the account and I need [access to it|to be added|it moved into my name].",
            "Can I [add|give access to] [my son|my daughter|a carer|my accountant|my tenant] on the account?",
            "I [need|want] to [update|change] [my email address|the contact number|my postal address|the name] on [my account|the account].",
            "I [never signed up|didn't create] an online account but I [got|received] a welcome email for one[ – is it a scam?|].",
            "I'd like to [close|delete] my online [account|profile][ and go back to paper|].",
            "The [two-step|two-factor|one-time] code [expires|runs out] before it [arrives|gets to me].",
            "I don't know my [member number|account number|customer reference] so I can't [register|sign up] online.",
            "[Someone|A stranger] [seems to have|has] [logged into|changed the password on] my account[ – I didn't do it|].",
            "{portal} shows [someone else's|the previous owner's|the wrong] [name|details|address] when I log in.",
            "I've [set up|registered] twice by mistake and now I have two [logins|accounts]; can you merge them?",
            "{portal} [won't let me|refuses to let me] [link|add] account {acct} to my login.",
            "The [security question|memorable word] [doesn't work|isn't accepted] even though I'm sure it's right.",
            "I'm [partially sighted|not good with computers] and need [the account set to|someone to set up] [large print|paper letters|phone access].",
            "My [username|login] [was|got] changed [without me|and I don't know the new one].",
        ],
        "vague": [
            "It won't let me [in|do anything][ again|].",
            "I keep getting [an error|a message] [and can't get any further|when I try].",
            "I'm [stuck|going round in circles] [on the screen|with it] and [nobody|no one] can help.",
            "I need to [sort out|change] some details [but|and] can't see how.",
            "Who do I [talk to|speak to] about [getting|getting back] in?",
        ],
        "request": [
            "Please [unlock|reset] my [account|login].",
            "Can you [send|resend] the [reset link|activation email|code]?",
            "Please [update|change] the details and confirm by [post|email|text].",
            "Can someone [call me|ring me] to [get me back in|walk me through it]?",
            "What [documents|proof] do you need from me?",
            "Please [remove|take off] the old [email|number] from the account.",
        ],
        "cause": [
            "I couldn't [log in|get into {portal}] to check",
            "{portal} [locked me out|kept saying \"session expired\"]",
            "my [login|password] stopped working",
        ],
    },
}

# Faint-cue sentences shared by neighbouring teams: on their own they cannot be
# routed with certainty, which is how a real desk's inbox looks too.
SHARED_VAGUE = [
    (("billing", "meter_reading", "account_access"), [
        "The [figures|numbers] [on my account|you've got for me|on the letter] [don't look right|look wrong|make no sense].",
        "[There's|I think there's] [a mistake|an error|something wrong] on my account[ again|].",
        "I [checked|looked at] {portal} and [something's|it's] [not right|off|wrong].",
        "Can someone [check|look over] my account? [It doesn't look right|Something's changed|I'm confused].",
        "What you've got on record for me is [wrong|out of date|not right].",
    ]),
    (("outage", "tree_and_line_clearance", "water_quality"), [
        "[Since|After] {storm} [things|everything] [hasn't been|isn't] right [up here|on our lane|at the house].",
        "There's [a problem|something wrong|an issue] [on|along|up] {street} [again|since {day}|].",
        "[Can|Could] you send someone to look at [the problem|what's happening] near {landmark}?",
        "[We've|I've] [reported|mentioned] this [before|twice] and it's [still|no] [happening|better].",
        "[It's|Things are] [worse|getting worse] [every time it rains|since {storm}|each week].",
    ]),
    (("new_connection", "account_access", "billing"), [
        "We've [just|recently] moved [into|to] {addr} and need to [get things set up|sort everything out].",
        "[I need|I'd like] to [sort out|update|set up] the paperwork for {addr}.",
        "[The house|The property|The farm] is [changing hands|being sold|being let] and I'm not sure what you need from us.",
        "[I need|Can I have] [help|some help] with [the account|the forms|the details] for {addr}.",
        "How do I put {addr} in [my|our] name?",
    ]),
]

GENERIC_REQUESTS = [
    "Can someone [call|ring] me back[ please|]?",
    "Please get back to me [when you can|as soon as possible|today].",
    "What [should|do] I do?",
    "Who do I need to [speak to|talk to]?",
    "Please [advise|let me know].",
    "[A reply|An answer] by email would be [best|great].",
]

# Which teams' topics plausibly meet in one message.  A mixed message takes its
# label from the first team of the pair, the second team appears as background.
MIX_PAIRS = [
    ("billing", "meter_reading", 5),
    ("meter_reading", "billing", 4),
    ("outage", "tree_and_line_clearance", 4),
    ("tree_and_line_clearance", "outage", 3),
    ("billing", "outage", 2),
    ("billing", "account_access", 3),
    ("account_access", "billing", 3),
    ("billing", "new_connection", 2),
    ("new_connection", "billing", 2),
    ("new_connection", "meter_reading", 2),
    ("meter_reading", "new_connection", 1),
    ("water_quality", "outage", 2),
    ("outage", "water_quality", 2),
    ("new_connection", "account_access", 2),
    ("account_access", "meter_reading", 2),
]

# Ways to join the background topic to the main one: as a leading clause (for
# statements) or as a sentence of its own (works before questions too).
BRIDGE_CLAUSES = [
    "[Ever since|Since|After] {cause}, ",
    "[Ok so|So|Right,] {cause} and now ",
    "[I think|I suspect|Maybe] it's [because|since] {cause}, [but|and] ",
]
BRIDGE_SENTENCES = [
    "[Background:|Context:|FYI,|For context,] {cause}. ",
    "[A while ago|Last month|Recently] {cause}. ",
]

# --------------------------------------------------------------------------
# Register-level fragments (shared by all teams)
# --------------------------------------------------------------------------

GREETINGS = {
    "polite": ["Hello", "Good morning", "Good afternoon", "Dear Sir or Madam", "Dear Hollowmere team",
               "Hi there", "Dear customer desk", "To whom it may concern", "Hello, hope you're well",
               "Good evening", "Dear all", "Hello team"],
    "plain": ["Hi", "Hello", "Hiya", "Morning", "Afternoon", "Hey", "Hi all", "Evening"],
    "angry": ["Right", "Not again", "Hello", "Once again", "Listen", "I've had enough"],
}

INTROS = [
    "This is {name} [from|at] {addr}.",
    "I'm a member at {addr}[ (account {acct})| – {acct}|].",
    "I'm writing on behalf of [my mother|my father|my neighbour|my tenant|an elderly relative], who lives at {addr}.",
    "We run the [farm shop|campsite|pottery|riding school|village café|smokehouse|tea room|cider barn] at {addr}.",
    "[My name is|I'm] {name} and I've been with the cooperative [for years|since {month}|since we moved here|about a decade].",
    "[Account|Member number|Ref]: {acct}.",
    "I live at {addr}[ in the valley| up the hill| by {landmark}|].",
    "I'm the [clerk|secretary|treasurer] of the {village} [village hall committee|parish meeting|allotment society].",
]

FILLERS = [
    "[My daughter|My son|Our lodger|The vet|My sister] [is visiting|was round] this week[, so it's all a bit chaotic|, so I'm only just getting to this|].",
    "Lambing has [started|kept us up all night], so forgive the [short|scrappy|late] message.",
    "I'm [not very good with|hopeless at] [computers|these forms|email], so [bear with me|apologies if this is in the wrong place].",
    "[Maybe I'm being naïve|I may be naïve], but [I thought this would be simple|surely this is easy to fix].",
    "I tried [phoning|calling] [twice|this morning] but [the line was busy|nobody answered|I was on hold for forty minutes].",
    "{animal} [have|has] been [unsettled|restless|off their food] all week, which doesn't help.",
    "The [road|lane] [up to|past] {landmark} is [flooded|icy|closed] [again|at the moment], in case anyone needs to come out.",
    "I work [nights|shifts|away] [most weeks|a lot], so email is [best|easiest].",
    "We've [only|just] [moved here|arrived] from the city, so all this is new to us.",
    "[We've got|There's] [a christening|a wedding|the harvest supper|a funeral|the village fete] on {day}, so timing is [awkward|tight].",
    "I'm [eighty-two|in my eighties|disabled|recovering from an operation] and [can't|don't] get about much.",
    "[Your website|The leaflet] [said|says] to [email|write], so here I am.",
    "I've [attached|included] [a photo|the letter|a screenshot|a copy of the statement][, hope that's OK|].",
    "[The neighbours|Next door|Half the lane] [say|said] they've had [the same thing|something similar].",
    "Honestly, the [café|tea room] queue gossip is all about this at the moment.",
    "[Apologies|Sorry] if I've sent this to the wrong [place|team|address].",
    "[We're|I'm] [away|out] on {day} [from {time}|all day], so please [don't come then|avoid that day].",
    "The [gate code|padlock code] is {n}{n} if anyone needs [to get in|access].",
    "[Please|Do] [mind|watch out for] {animal} if you come [up|round].",
    "I [had|have] the [builders|plumber|electrician] round [last week|on {day}] and they [said|reckoned] it wasn't [them|their side].",
    "[I know|I appreciate] you're [busy|stretched|short-staffed] after {storm}.",
    "The [mobile|phone] signal up here is [terrible|patchy|non-existent], so email [works better|is best].",
    "We [keep|run] a few [bee hives|polytunnels|holiday yurts|rescue donkeys] here, if that's relevant.",
    "[My|Our] [old|previous] [landlord|agent|solicitor] [said|told me] to [contact you directly|get in touch with you].",
    "We're [in the middle of|halfway through] [silage|haymaking|shearing|the apple pressing|harvest], so [evenings|early mornings] are [best|easiest] for a call.",
    "The [shed roof|greenhouse|chicken coop|garden wall] [blew down|came apart|collapsed] in {storm} as well, so it's been [quite a week|a miserable week|one thing after another].",
    "[I'm|We're] [fostering|looking after] [two|three] [lurchers|orphaned lambs|rescue hens|my sister's spaniels] [at the moment|for a fortnight], so the house is [bedlam|chaos|a zoo].",
    "[I'm|We're] [self-employed|a small pottery|a bakery|a joinery workshop], so [every hour|every day] [without|lost] [matters|costs us].",
    "[I|We] [cycled|walked] down to {landmark} to [ask around|see if anyone knew anything], [but|and] [nobody had a clue|it was shut].",
    "My [hearing|eyesight] isn't [great|what it was], so [please write rather than phone|a letter would be easier than a call].",
    "We [only|just] [get|have] [Tuesdays and Fridays|weekends|Thursday afternoons] off, [annoyingly|unfortunately].",
    "The [choir|darts team|quilting circle|bell ringers] meet at ours on {day}, so [it's|that's] [a bit urgent|rather pressing].",
    "[My grandson|The lad next door|A friend from the chapel] [helped|is helping] me [type|write] this.",
    "[The|Our] [septic tank|borehole|rainwater butt|woodburner] is [a separate saga|another story entirely], don't worry.",
    "We [moved|came] here for the [peace and quiet|birdsong|dark skies], [ironically|funnily enough].",
    "[It's|This is] [our first winter|the second winter] in the valley and [we're learning|it's been an education].",
    "[Last|This] [spring|autumn] the [cuckoo|curlews|swallows|lapwings] were back, which cheered everyone up.",
    "I've [read|skimmed] the [FAQ|help pages|members' handbook] and [couldn't find|found nothing about] this.",
    "The [post|postman] only [comes|reaches us] [twice a week|when the ford is passable], so letters take [ages|forever].",
    "I'm [chair|a trustee] of the [cricket club|community orchard|village shop], so [others|a few people] [may|might] ask too...",
    "[Please excuse|Forgive] [the typos|my spelling], I'm [on my phone|typing with cold hands|in the tractor cab].",
    "[We've|I've] [stocked up on|bought] [candles|bottled water|paraffin|firewood] [just in case|to be safe].",
    "My [insurer|insurance company|landlord] [wants|needs] something in writing from you.",
    "[The|Our] [kitchen|bathroom|extension] is [half-finished|being refitted|gutted] at the moment, [if that matters|for what it's worth].",
    "The [solicitor|estate agent|surveyor] [keeps asking|asked again] [about this|for an update] [this morning|today].",
    "Our [broadband|phone line] [is also down|went too|is dodgy as well], so I'm writing from {landmark}.",
    "[I know|I realise] it's [the weekend|a bank holiday|late], [sorry|apologies].",
]

ANGRY = [
    "This is the [third|fourth|fifth] time I've [contacted|written to|rung] you about this.",
    "Nobody ever [answers|picks up] the phone.",
    "[Frankly|Honestly] this is [ridiculous|a disgrace|not good enough|shocking].",
    "I'm [fed up|sick and tired|tired] of [chasing you|being ignored|waiting].",
    "What exactly am I paying [for|my membership for]?",
    "I [was|have been] [promised|told] a [call back|reply] [twice|days ago] and heard nothing.",
]

EXTRA_DETAILS = [
    "[My|The] [account|member] [number|ref] is {acct}.",
    "[Ref|Reference|Our ref]: {wo}.",
    "[The|My] meter is {meter}.",
    "[Best number|Phone|Mobile]: {phone}.",
    "[You can|Please] email me at {email}.",
    "[It's|We're at] {addr}.",
    "[It started|This began|It happened] [around|at] {time} [on {day}|yesterday|last week|on the {nth}].",
]

CLOSINGS = {
    "polite": ["Many thanks", "Kind regards", "Thank you", "Thanks in advance", "Best wishes", "Regards",
               "With thanks", "Thank you for your help", "Yours faithfully", "All the best"],
    "plain": ["Thanks", "Cheers", "Ta", "Thx", "Thanks!", "Regards", "Cheers for now"],
    "angry": ["Sort it out.", "I expect a reply today.", "Not impressed.", "Awaiting your urgent response.",
              "Regards (not very kind ones)", "Fix it."],
}

REGISTERS = [("terse", 0.22), ("plain", 0.28), ("polite", 0.28), ("angry", 0.10), ("rambling", 0.12)]


# --------------------------------------------------------------------------
# Message assembly
# --------------------------------------------------------------------------


def weighted(rng: random.Random, pairs):
    """Pick the first element of (item, weight, ...) tuples by weight."""
    items = [p[0] for p in pairs]
    weights = [p[-1] for p in pairs]
    return rng.choices(items, weights)[0]


def sentence_case(s: str) -> str:
    return s[:1].upper() + s[1:] if s else s


def core_sentences(c: Composer, label: str, vague: bool) -> list[str]:
    team = TEAMS[label]
    if vague:
        pools = [team["vague"]] + [lines for members, lines in SHARED_VAGUE if label in members]
        return [sentence_case(c.expand(c.pick(c.pick(pools))))]
    out = [sentence_case(c.expand(c.pick(team["issue"])))]
    if c.rng.random() < 0.25:  # a second symptom now and then
        out.append(sentence_case(c.expand(c.pick(team["issue"]))))
    return out


def mixed_sentences(c: Composer, primary: str, secondary: str) -> list[str]:
    """The primary team's problem, framed by the secondary team's topic."""
    cause = c.expand(c.pick(TEAMS[secondary]["cause"]))
    issue = sentence_case(c.expand(c.pick(TEAMS[primary]["issue"])))
    if c.rng.random() < 0.6:
        if issue.endswith("?") or c.rng.random() < 0.3:
            return [sentence_case(c.expand(c.pick(BRIDGE_SENTENCES).replace("{cause}", cause))).strip(), issue]
        lower_ok = issue[1:2].islower() and not issue.startswith(("I ", "I'"))
        body = issue[0].lower() + issue[1:] if lower_ok else issue
        return [sentence_case(c.expand(c.pick(BRIDGE_CLAUSES).replace("{cause}", cause)) + body)]
    # Otherwise: two full complaints side by side.
    other = sentence_case(c.expand(c.pick(TEAMS[secondary]["issue"])))
    return [issue, other] if c.rng.random() < 0.5 else [other, issue]


def compose(c: Composer, label: str, register: str, vague: bool, mix: str | None) -> str:
    rng = c.rng
    body = mixed_sentences(c, label, mix) if mix else core_sentences(c, label, vague)

    if register == "terse":
        if rng.random() < 0.5:
            body.append(c.expand(c.pick(EXTRA_DETAILS)))
        text = " ".join(body[:2])
        if rng.random() < 0.35:
            text = text.lower()
        if rng.random() < 0.4:
            text = text.rstrip(".")
        return text

    sentences = list(body)
    if rng.random() < 0.7:
        generic = rng.random() < (0.75 if vague else 0.25)
        sentences.append(c.expand(c.pick(GENERIC_REQUESTS if generic else TEAMS[label]["request"])))
    if rng.random() < 0.35:
        sentences.insert(0, c.expand(c.pick(INTROS)))
    if register == "rambling":
        for filler in rng.sample(FILLERS, rng.randint(1, 2)):
            sentences.insert(rng.randint(0, len(sentences)), c.expand(filler))
    elif rng.random() < 0.15:
        sentences.insert(rng.randint(0, len(sentences)), c.expand(c.pick(FILLERS)))
    if register == "angry":
        sentences.insert(rng.randint(1, len(sentences)), c.expand(c.pick(ANGRY)))
    if rng.random() < 0.3:
        sentences.append(c.expand(c.pick(EXTRA_DETAILS)))
    sentences = [sentence_case(x) for x in sentences[:5]]

    if register == "angry":
        sentences = [shout(rng, s) for s in sentences]

    tone = "plain" if register in ("plain", "rambling") else register
    greeting = c.pick(GREETINGS[tone]) if rng.random() < 0.6 else ""
    closing = c.pick(CLOSINGS[tone]) if rng.random() < 0.55 else ""
    signature = c.slot_name() if (closing and rng.random() < 0.6) else ""
    if signature and rng.random() < 0.15:
        signature += "\n" + c.slot_phone()

    if register in ("polite", "rambling") and rng.random() < 0.45:
        # Letter layout with line breaks.
        parts = []
        if greeting:
            parts.append(greeting + ",")
        parts.append(" ".join(sentences) if rng.random() < 0.6 else "\n".join(sentences))
        if closing:
            parts.append(closing + ("," if signature else "") + ("\n" + signature if signature else ""))
        return "\n\n".join(parts)

    text = " ".join(sentences)
    if greeting:
        text = greeting + rng.choice([", ", ". ", " – ", ",\n"]) + text
    if closing:
        text += " " + closing + ("," if signature and not closing.endswith((".", "!", ")")) else "")
        if signature:
            text += " " + signature
    return text


def shout(rng: random.Random, sentence: str) -> str:
    if rng.random() < 0.3:
        sentence = sentence.rstrip(".") + rng.choice(["!", "!!", "!!!", "?!"])
    if rng.random() < 0.12:
        words = sentence.split(" ")
        i = rng.randrange(len(words))
        words[i] = words[i].upper()
        sentence = " ".join(words)
    return sentence


# --------------------------------------------------------------------------
# Surface noise: typos and punctuation variants
# --------------------------------------------------------------------------

_KEYBOARD = {
    "a": "qsz", "b": "vn", "c": "xv", "d": "sf", "e": "wr", "f": "dg", "g": "fh", "h": "gj", "i": "uo",
    "j": "hk", "k": "jl", "l": "k", "m": "n", "n": "bm", "o": "ip", "p": "o", "r": "et", "s": "ad",
    "t": "ry", "u": "yi", "v": "cb", "w": "qe", "y": "tu",
}
_WORD = re.compile(r"[A-Za-z]{4,}")


def typo(rng: random.Random, word: str) -> str:
    i = rng.randrange(1, len(word) - 1)
    kind = rng.randrange(4)
    if kind == 0:  # swap two neighbours
        return word[:i] + word[i + 1] + word[i] + word[i + 2:]
    if kind == 1:  # drop one
        return word[:i] + word[i + 1:]
    if kind == 2:  # double one
        return word[:i] + word[i] + word[i:]
    near = _KEYBOARD.get(word[i].lower())  # fat finger
    return word[:i] + (rng.choice(near) if near else word[i]) + word[i + 1:]


def add_noise(rng: random.Random, text: str, rate: float) -> str:
    text = _WORD.sub(lambda m: typo(rng, m.group(0)) if rng.random() < rate else m.group(0), text)
    if rng.random() < 0.08:
        text = text.replace("'", "\u2019")  # curly apostrophes from phones
    if rng.random() < 0.03:
        text = text.replace("...", "\u2026")
    return text


# --------------------------------------------------------------------------
# Corpus
# --------------------------------------------------------------------------


def allocate(total: int, shares) -> list[int]:
    """Largest-remainder rounding of total * share, stable in input order."""
    raw = [total * s for s in shares]
    counts = [int(r) for r in raw]
    order = sorted(range(len(raw)), key=lambda i: (-(raw[i] - counts[i]), i))
    for i in order[: total - sum(counts)]:
        counts[i] += 1
    return counts


def make_documents(rng: random.Random, n_docs: int) -> list[tuple[str, str]]:
    composer = Composer(rng)
    names = [name for name, _ in LABELS]
    counts = allocate(n_docs, [share for _, share in LABELS])
    labels = [name for name, k in zip(names, counts) for _ in range(k)]
    rng.shuffle(labels)

    pairs_by_label = {name: [(b, w) for a, b, w in MIX_PAIRS if a == name] for name in names}
    seen: set[str] = set()
    docs = []
    for label in labels:
        for _attempt in range(50):
            register = weighted(rng, REGISTERS)
            mix = None
            final = label
            if pairs_by_label[label] and rng.random() < MIXED_RATE:
                mix = weighted(rng, pairs_by_label[label])
                if rng.random() < COIN_FLIP_SHARE:
                    final = rng.choice([label, mix])  # genuinely ambiguous routing
            vague = mix is None and rng.random() < VAGUE_RATE
            rate = TYPO_RATE * (1.6 if register in ("terse", "angry") else 0.85)
            text = add_noise(rng, compose(composer, label, register, vague, mix), rate).strip()
            if text not in seen:
                break
        seen.add(text)
        docs.append((text, final))
    return docs


def split(rng: random.Random, docs):
    """Stratified split; each split keeps a shuffled but reproducible order."""
    by_label: dict[str, list[int]] = {name: [] for name, _ in LABELS}
    for i, (_, label) in enumerate(docs):
        by_label[label].append(i)
    parts: dict[str, list[int]] = {name: [] for name, _ in SPLITS}
    for name, _ in LABELS:
        idx = by_label[name]
        rng.shuffle(idx)
        sizes = allocate(len(idx), [share for _, share in SPLITS])
        start = 0
        for (split_name, _), size in zip(SPLITS, sizes):
            parts[split_name].extend(idx[start : start + size])
            start += size
    out = {}
    for split_name, _ in SPLITS:
        idx = sorted(parts[split_name])
        rng.shuffle(idx)
        out[split_name] = [docs[i] for i in idx]
    return out


def write_outputs(out: Path, splits, seed: int, n_docs: int) -> None:
    out.mkdir(parents=True, exist_ok=True)
    for name, rows in splits.items():
        with open(out / f"{name}.csv", "w", encoding="utf-8", newline="") as fh:
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow(["text", "label"])
            writer.writerows(rows)
        with open(out / f"{name}.jsonl", "w", encoding="utf-8", newline="\n") as fh:
            for text, label in rows:
                fh.write(json.dumps({"text": text, "label": label}, ensure_ascii=False) + "\n")

    # Folder-per-label sample: the first documents of each label in train order,
    # written exactly as they appear in the CSV (no trailing newline added).
    sample = out / "sample"
    if sample.exists():
        shutil.rmtree(sample)
    for label, _ in LABELS:
        chosen = [text for text, lab in splits["train"] if lab == label][:SAMPLE_PER_LABEL]
        folder = sample / label
        folder.mkdir(parents=True)
        for i, text in enumerate(chosen, start=1):
            (folder / f"{i:04d}.txt").write_bytes(text.encode("utf-8"))

    (out / "README.md").write_text(readme(splits, seed, n_docs), encoding="utf-8", newline="\n")


def count_table(splits) -> list[tuple[str, list[int]]]:
    rows = []
    for label, _ in LABELS:
        rows.append((label, [sum(1 for _, lab in splits[s] if lab == label) for s, _ in SPLITS]))
    rows.append(("total", [len(splits[s]) for s, _ in SPLITS]))
    return rows


def readme(splits, seed: int, n_docs: int) -> str:
    lines = [
        "# Demo corpus: Hollowmere Valley Cooperative customer desk",
        "",
        "Every document here is invented. `scripts/make_demo.py` composes the messages from",
        "made-up phrase fragments, with invented village, street and person names generated",
        "from syllables; no text is taken from anywhere else.",
        "",
        "The scenario: members of Hollowmere Valley Cooperative, a fictional rural",
        "water-and-power cooperative, write to its customer desk. Each message is routed to",
        "one of seven teams (the label). Some messages raise two teams' topics (a share of",
        "those are a genuine coin flip) and about a quarter of all messages carry only a",
        "faint cue, so no classifier should reach 100%: the generator is tuned so that a",
        "plain tf-idf + logistic-regression baseline lands at roughly 0.85-0.93 test accuracy.",
        "",
        "Files: `{train,dev,test}.csv` (header `text,label`, RFC 4180 quoting; texts may",
        "contain commas, quotes and line breaks), `{train,dev,test}.jsonl` (same rows, same",
        "order), and `sample/<label>/NNNN.txt` (10 training documents per label, one per file,",
        "no trailing newline). All files are UTF-8.",
        "",
        "| label | train | dev | test |",
        "|---|---:|---:|---:|",
    ]
    for label, counts in count_table(splits):
        lines.append(f"| {label} | " + " | ".join(str(n) for n in counts) + " |")
    args = "" if (seed, n_docs) == (DEFAULT_SEED, DEFAULT_DOCUMENTS) else f" --seed {seed} --documents {n_docs}"
    lines += [
        "",
        "Regenerate (deterministic, byte-identical output):",
        "",
        "```",
        f"python scripts/make_demo.py --out data/demo{args}",
        "```",
        "",
    ]
    return "\n".join(lines)


def main(argv=None) -> None:
    parser = argparse.ArgumentParser(description="Generate the invented Hollowmere demo corpus.")
    parser.add_argument("--out", default="data/demo", help="output directory (default: data/demo)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED, help=f"random seed (default: {DEFAULT_SEED})")
    parser.add_argument("--documents", type=int, default=DEFAULT_DOCUMENTS,
                        help=f"number of documents (default: {DEFAULT_DOCUMENTS})")
    args = parser.parse_args(argv)
    if args.documents < 10 * len(LABELS):
        parser.error(f"--documents must be at least {10 * len(LABELS)}")

    rng = random.Random(args.seed)
    docs = make_documents(rng, args.documents)
    splits = split(rng, docs)
    write_outputs(Path(args.out), splits, args.seed, args.documents)

    print(f"{'label':<26}" + "".join(f"{s:>7}" for s, _ in SPLITS))
    for label, counts in count_table(splits):
        print(f"{label:<26}" + "".join(f"{n:>7}" for n in counts))
    print(f"wrote {args.out}/")


if __name__ == "__main__":
    main()
