"""Seeded generator for the two invented demo scenarios.

Voltwren Home Energy (support tickets) and Haulmere Dispatch Software (inbound leads) are made up; every
name, product and message here is invented. The data is built to exercise the router honestly: queues share
vocabulary, some items are ambiguous, words carry typos, bodies are short and long or missing, a few labels
are wrong, structured fields have gaps and the mix drifts over time (a new product, a new firmware release,
a new kind of spam, a shifted queue mix in the incoming batch).

Self-contained on purpose (stdlib + numpy + pandas only): it is shipped inside the package as well as run
as a script. The same seed always gives the same frames and the same file bytes.

    python demo_corpus/generate.py --scenario all            # rewrite the committed defaults
    python demo_corpus/generate.py --scenario voltwren --n 100000 --out bench-data
"""

from __future__ import annotations

import argparse
import json
import math
import random
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

SCENARIOS = ("voltwren", "haulmere")
DEFAULT_SEED = 7
DEFAULT_SIZES = {"voltwren": (6000, 500), "haulmere": (4000, 400)}
LABEL_NOISE = 0.03  # share of history labels replaced by a wrong queue
FILE_NAMES = {
    "voltwren": ("voltwren_tickets.csv", "voltwren_incoming.csv", "voltwren_incoming_truth.csv"),
    "haulmere": ("haulmere_leads.jsonl", "haulmere_incoming.jsonl", "haulmere_incoming_truth.jsonl"),
}

# history window and incoming window, as day offsets from the history start
HISTORY_START = np.datetime64("2026-03-01T00:00:00")
HISTORY_DAYS = 184  # 2026-03-01 .. 2026-08-31
INCOMING_DAYS = {"voltwren": 15, "haulmere": 20}  # the incoming batch arrives in September

# --------------------------------------------------------------------------------------------------------
# shared machinery
# --------------------------------------------------------------------------------------------------------

MONTHS = ("March", "April", "May", "June", "July", "August", "September")
WEEKDAYS = ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday")
FIRST_NAMES = (
    "Priya", "Tomas", "Aino", "Dev", "Maren", "Kofi", "Lena", "Rafael", "Ines", "Callum", "Yusuf", "Hana",
    "Oskar", "Nadia", "Jonah", "Mei", "Bram", "Sofia", "Arlo", "Zainab", "Elif", "Teodor", "Rosa", "Idris",
)  # fmt: skip


class _Slots(dict):
    """Template slot values for one item: drawn on first use, then kept so a text stays self-consistent."""

    def __init__(self, r: random.Random, makers: dict[str, Callable[[random.Random], str]], **fixed: str):
        super().__init__(fixed)
        self._r = r
        self._makers = makers

    def __missing__(self, key: str) -> str:
        value = self._makers[key](self._r)
        self[key] = value
        return value


def _pick(values: Sequence[str]) -> Callable[[random.Random], str]:
    return lambda r: r.choice(values)


def _date(r: random.Random) -> str:
    return f"{r.randint(1, 28)} {r.choice(MONTHS[:6])}"


def _typos(text: str, r: random.Random, rate: float) -> str:
    """Swap, drop or double a letter in about `rate` of the words (geometric skips keep this cheap)."""
    if not text or rate <= 0:
        return text
    words = text.split(" ")
    log_q = math.log(1.0 - rate)
    i = int(math.log(1.0 - r.random()) / log_q)
    while i < len(words):
        w = words[i]
        if len(w) >= 4 and w.isalpha():
            j = r.randrange(1, len(w) - 1)
            kind = r.random()
            if kind < 0.45:
                w = w[:j] + w[j + 1] + w[j] + w[j + 2 :]
            elif kind < 0.8:
                w = w[:j] + w[j + 1 :]
            else:
                w = w[:j] + w[j] + w[j:]
            words[i] = w
        i += 1 + int(math.log(1.0 - r.random()) / log_q)
    return " ".join(words)


def _times(rng: np.random.Generator, n: int, start_day: int, days: int, growth: float) -> np.ndarray:
    """Arrival times: weekday-heavy, office-hours-heavy, volume growing by `growth` over the window."""
    day = np.arange(days)
    weekday = (day + start_day + 6) % 7  # 2026-03-01 is a Sunday; 0 = Monday
    w = np.where(weekday < 5, 1.0, np.where(weekday == 5, 0.45, 0.3)) * (
        1.0 + growth * day / max(days - 1, 1)
    )
    d = rng.choice(days, size=n, p=w / w.sum()) + start_day
    hour_w = np.array(
        [1, 1, 1, 1, 1, 2, 4, 8, 14, 16, 16, 15, 13, 14, 15, 14, 12, 10, 8, 7, 6, 4, 3, 2], float
    )
    h = rng.choice(24, size=n, p=hour_w / hour_w.sum())
    secs = d.astype(np.int64) * 86400 + h * 3600 + rng.integers(0, 3600, size=n)
    return np.sort(HISTORY_START + secs.astype("timedelta64[s]"))


def _draw_queues(rng: np.random.Generator, probs: np.ndarray) -> np.ndarray:
    """One queue index per row from a row-wise probability matrix."""
    cum = np.cumsum(probs / probs.sum(axis=1, keepdims=True), axis=1)
    u = rng.random(len(probs))
    return np.minimum((u[:, None] > cum).sum(axis=1), probs.shape[1] - 1)


def _by_queue(
    rng: np.random.Generator, q: np.ndarray, values: Sequence[str], table: np.ndarray
) -> np.ndarray:
    """A category column whose distribution depends on the queue (`table[q]` is a row of weights)."""
    out = np.empty(len(q), dtype=object)
    for k in range(table.shape[0]):
        idx = np.flatnonzero(q == k)
        p = table[k] / table[k].sum()
        out[idx] = np.asarray(values, dtype=object)[rng.choice(len(values), size=len(idx), p=p)]
    return out


def _lognormal_by_queue(
    rng: np.random.Generator, q: np.ndarray, medians: Sequence[float], sigmas: Sequence[float]
) -> np.ndarray:
    mu = np.log(np.asarray(medians, float))[q]
    return np.exp(mu + np.asarray(sigmas, float)[q] * rng.standard_normal(len(q)))


def _blank(rng: np.random.Generator, col: np.ndarray, share: float | np.ndarray) -> np.ndarray:
    """Set a share of a column to missing."""
    col = col.astype(object)
    col[rng.random(len(col)) < share] = None
    return col


def _ints(values: np.ndarray, missing: np.ndarray) -> pd.Series:
    s = pd.Series(np.rint(values).astype(np.int64), dtype="Int64")
    s[missing] = pd.NA
    return s


def _ids(rng: np.random.Generator, prefix: str, n: int, first: int) -> list[str]:
    """Unique, increasing ids with small random gaps (deleted or merged items leave holes)."""
    nums = first + np.cumsum(rng.integers(1, 4, size=n))
    return [f"{prefix}{v:06d}" for v in nums]


def _noisy_labels(rng: np.random.Generator, q: np.ndarray, prior: np.ndarray, share: float) -> np.ndarray:
    """Replace `share` of labels with another queue, chosen by the prior (mistakes favour common queues)."""
    q = q.copy()
    hit = np.flatnonzero(rng.random(len(q)) < share)
    k = len(prior)
    for i, u in zip(hit, rng.random(len(hit)), strict=True):
        p = prior.copy()
        p[q[i]] = 0.0
        q[i] = min(int(np.searchsorted(np.cumsum(p / p.sum()), u)), k - 1)
    return q


def _ramp(t_days: np.ndarray, start: float, end: float, top: float) -> np.ndarray:
    """0 before `start`, rising linearly to `top` at `end`, then flat (used for drift)."""
    return np.clip((t_days - start) / (end - start), 0.0, 1.0) * top


def _sample_body(
    r: random.Random,
    k: int,
    own: Sequence[str],
    generic: Sequence[str],
    neighbour: Sequence[str],
    p_generic: float,
    p_neighbour: float,
) -> list[str]:
    """k sentences: the first from the queue's own pool, the rest mixed from own, generic and a neighbour."""
    n_gen = n_nb = 0
    for _ in range(k - 1):
        u = r.random()
        if u < p_generic:
            n_gen += 1
        elif u < p_generic + p_neighbour:
            n_nb += 1
    n_own = min(k - n_gen - n_nb, len(own))
    sents = r.sample(own, n_own)
    rest = r.sample(generic, min(n_gen, len(generic))) + [r.choice(neighbour) for _ in range(n_nb)]
    rest += sents[1:]
    r.shuffle(rest)
    return sents[:1] + rest


LENGTH_WEIGHTS = (10, 16, 18, 15, 11, 8, 6, 5, 4, 3, 2, 2)  # 1..12 sentences


# --------------------------------------------------------------------------------------------------------
# Voltwren Home Energy: support tickets
# --------------------------------------------------------------------------------------------------------

VW_QUEUES = ("billing", "installation", "hardware_fault", "app_connectivity", "cancellations", "safety")
VW_PRIOR = np.array([0.30, 0.15, 0.22, 0.20, 0.10, 0.03])
VW_DRIFT = np.array([-0.04, 0.02, 0.0, 0.04, -0.02, 0.0])  # change across the history window
VW_INCOMING_MIX = np.array([0.22, 0.13, 0.24, 0.31, 0.07, 0.03])  # after the firmware 4.1 release
VW_CHANNELS = ("email", "phone", "chat", "web_form", "app")
VW_PRODUCTS = ("Hearthcell 10", "Hearthcell 15", "Sunweave inverter", "Gridlatch gateway", "none")
VW_NEW_PRODUCT = "Hearthcell 20"  # launched in June; grows through the summer
VW_PLANS = ("basic", "plus", "premier")
VW_REGIONS = ("North Coast", "Riverlands", "Eastmoor", "Southvale", "Highfell", "Westbay")

VW_CHANNEL_P = np.array([
    [0.35, 0.20, 0.20, 0.15, 0.10],  # billing
    [0.30, 0.30, 0.10, 0.25, 0.05],  # installation
    [0.25, 0.25, 0.15, 0.15, 0.20],  # hardware_fault
    [0.15, 0.10, 0.30, 0.10, 0.35],  # app_connectivity
    [0.25, 0.50, 0.10, 0.10, 0.05],  # cancellations
    [0.20, 0.45, 0.15, 0.10, 0.10],  # safety
])  # fmt: skip
VW_PRODUCT_P = np.array([
    [0.22, 0.18, 0.12, 0.08, 0.40],
    [0.30, 0.30, 0.25, 0.05, 0.10],
    [0.30, 0.28, 0.32, 0.07, 0.03],
    [0.15, 0.15, 0.10, 0.50, 0.10],
    [0.20, 0.18, 0.12, 0.08, 0.42],
    [0.40, 0.38, 0.17, 0.03, 0.02],
])  # fmt: skip
VW_PLAN_P = np.array([
    [0.45, 0.35, 0.20], [0.35, 0.40, 0.25], [0.30, 0.35, 0.35],
    [0.40, 0.35, 0.25], [0.55, 0.30, 0.15], [0.35, 0.35, 0.30],
])  # fmt: skip
VW_REGION_P = np.array([
    [1.0, 1.0, 1.0, 1.0, 1.0, 1.0], [0.8, 1.0, 0.9, 1.6, 1.0, 0.9], [1.0, 1.1, 1.0, 1.0, 1.2, 1.0],
    [1.1, 1.0, 1.0, 1.0, 0.8, 1.2], [1.0, 1.0, 1.2, 0.9, 1.0, 1.0], [1.0, 1.0, 1.0, 1.0, 1.0, 1.0],
])  # fmt: skip
VW_TENURE_MEDIAN = (320, 25, 380, 250, 700, 300)
VW_TENURE_SIGMA = (0.9, 1.0, 0.8, 1.0, 0.6, 0.9)
VW_NEIGHBOURS = {
    "billing": ("cancellations", "installation"),
    "installation": ("billing", "hardware_fault"),
    "hardware_fault": ("app_connectivity", "installation"),
    "app_connectivity": ("hardware_fault", "billing"),
    "cancellations": ("billing", "hardware_fault"),
    "safety": ("hardware_fault",),
}

VW_SUBJECTS = {
    "billing": (
        "Question about my {month} bill", "Charged twice this month", "Invoice {invoice} looks wrong",
        "Refund request", "Direct debit failed", "Why did my plan price go up?", "Export credit missing",
        "Need a copy of my invoice", "Card payment keeps failing", "Billing question", "Overcharged on {plan} plan",
        "Deposit not showing on account", "Wrong amount taken", "Monitoring fee query",
    ),
    "installation": (
        "Installation date for my {product}", "Need to reschedule install", "When will the installer arrive?",
        "Site survey follow-up", "Install booked but nobody came", "Question before installation",
        "Move install to {weekday}", "Permit paperwork for install", "Installer did not finish",
        "Order {order} still not scheduled", "Second unit install", "Access for install team",
    ),
    "hardware_fault": (
        "{product} not charging", "Error {err} on the display", "Inverter keeps tripping",
        "Battery stuck at {pct}%", "Red light on unit", "{product} shut down overnight",
        "No solar production since {weekday}", "Fault light on the cabinet", "Unit keeps restarting",
        "Battery module offline", "Fan running nonstop", "Warranty repair needed",
    ),
    "app_connectivity": (
        "App won't connect to my battery", "Gridlatch gateway offline", "Can't log in to the app",
        "No data in the app since {weekday}", "Wi-Fi setup fails", "App shows wrong numbers", "Pairing problem",
        "App keeps crashing", "Add a second user to the app", "Gateway lost connection", "Notifications stopped",
    ),
    "cancellations": (
        "Cancel my monitoring plan", "I want to cancel", "Cancel order {order}", "Ending my contract",
        "Please close my account", "Moving house - cancel service", "Not renewing", "Cancellation fee?",
        "Stop my subscription", "Leaving Voltwren",
    ),
    "safety": (
        "Burning smell from battery", "Battery cabinet is swelling", "Smoke coming from inverter",
        "URGENT: unit very hot", "Hissing noise from battery", "Scorch marks on the wall by the unit",
        "Buzzing from the battery cabinet", "Battery smells of burning plastic", "Is my battery safe?",
        "Urgent - {product} overheating",
    ),
}  # fmt: skip

VW_SENTENCES = {
    "billing": (
        "I was charged {amount} on {date} but my plan is only {amount2} a month.",
        "My {month} invoice ({invoice}) shows the monitoring fee twice.",
        "The export credit for the power my panels sent back to the grid is missing from the last statement.",
        "Can you send me a copy of invoice {invoice} with my business name on it?",
        "The direct debit bounced because I changed banks, how do I update the details?",
        "I moved to the {plan} plan last month and was still billed the old rate.",
        "Please refund the difference to the card on file.",
        "I'd like to understand what the 'service adjustment' line on my bill means.",
        "Your payment page keeps rejecting my new card.",
        "I paid the installation deposit of {amount} but it is not showing on my account.",
        "Is there a discount for paying yearly instead of monthly?",
        "My account says overdue but I paid on {date}.",
        "The price on the renewal letter is higher than what I agreed on the phone.",
        "Nobody explained that the {plan} plan has a setup charge.",
    ),
    "installation": (
        "I ordered a {product} on {date} and have not been given an installation date yet.",
        "Can we move the install from {weekday} to {weekday2}? I have to work that day.",
        "The installer was booked for {date} between {hour}am and noon but nobody turned up.",
        "The site survey said the cabinet should go in the {room}, is that still the plan?",
        "Do I need to be home for the whole installation or just the start?",
        "Our electrician asked whether the {product} needs its own breaker.",
        "The install team left without fitting the {product2}.",
        "We have a narrow side passage, will the crew be able to get the unit through?",
        "I still need the paperwork for the permit before the install can go ahead.",
        "Order {order} has shown 'awaiting scheduling' for three weeks now.",
        "How long does an installation usually take for two units?",
        "Please confirm the installer will bring the wall bracket.",
        "The installers drilled through the wrong wall and left a mess in the {room}.",
        "The sealant the crew used still leaves a strong smell in the {room}.",
        "We want to add a second battery next to the one fitted in {month}.",
    ),
    "hardware_fault": (
        "Since {weekday} the {product} has stayed at {pct}% and will not charge from the panels.",
        "The display shows error {err} and the unit restarts every few minutes.",
        "The inverter trips the breaker every morning at about {hour}am.",
        "There is a red fault light on the front of the cabinet.",
        "Solar production dropped to zero although it was sunny all day.",
        "I already tried switching it off at the isolator for ten minutes as the manual says.",
        "The fan runs constantly even when the battery is idle.",
        "One of the two battery modules shows offline on the status screen.",
        "The unit clicks on and off repeatedly and then shuts down.",
        "It is only {n} months old so I assume this is under warranty.",
        "Capacity seems to have dropped, it is empty by {hour}pm now.",
        "Can someone send a technician to look at it?",
        "The unit feels warm in the afternoon, which I assume is normal, but it stopped discharging.",
        "It gets hot in the afternoon sun, the manual says that is fine, but now it shuts itself off.",
        "The error clears after a restart but comes back within a day.",
    ),
    "app_connectivity": (
        "The app has said 'gateway offline' since {weekday} even though the router is fine.",
        "I changed my Wi-Fi password and now the Gridlatch gateway will not reconnect.",
        "I cannot log in, the app says my password is wrong but the reset email never arrives.",
        "The energy graph in the app has been blank for {n} days.",
        "The pairing step times out at {pct}% every time.",
        "The numbers in the app don't match what the display on the unit says.",
        "My partner needs access to the app too, how do we add a second user?",
        "The app crashes as soon as I open the history tab.",
        "Notifications stopped coming through on my phone.",
        "I've reinstalled the app twice and restarted the router.",
        "The gateway light blinks blue and never goes solid.",
        "Is there a way to see the data on a computer instead of the phone?",
        "The app shows the battery as charging when it is clearly discharging.",
    ),
    "cancellations": (
        "Please cancel my {plan} plan at the end of this billing period.",
        "We are selling the house in {month} and will not need the service anymore.",
        "I want to cancel order {order} before the installation is booked.",
        "Another supplier offered a cheaper monitoring plan so I will be leaving.",
        "What is the notice period for cancelling the contract?",
        "Is there a cancellation fee if I end the contract early?",
        "I've been a customer for {years} years but the price rise is too much.",
        "Please confirm in writing that the account is closed.",
        "We are moving abroad and need to end everything by {date}.",
        "If I cancel, will someone come to remove the unit?",
        "I'm not happy with how long the repair took and want to cancel.",
        "Please stop the direct debit once the account is closed.",
        "I don't use the monitoring at all, so there is no point paying for it.",
    ),
    "safety": (
        "I have switched everything off at the isolator and kept the kids away from the {room}.",
        "Should I call the fire brigade or is it safe to wait for a technician?",
        "Nobody has touched it since the smell started.",
        "It's mounted in the {room} right next to the bikes and some paint tins.",
        "Please tell me what to do, I don't want to leave it running.",
        "The display still says normal operation, which worries me more.",
        "It started after the heatwave on {weekday}.",
        "I have taken photos if you need them.",
        "We have opened the garage door to let air through.",
    ),
}  # fmt: skip

VW_HAZARDS = (
    "There is a strong smell of burning coming from the {product} in the {room}.",
    "The side panel of the battery cabinet is bulging, it looks swollen.",
    "I saw a thin wisp of smoke from the vent at the top of the inverter.",
    "The casing is too hot to touch, much hotter than normal.",
    "It is making a hissing sound that I have never heard before.",
    "There are brown scorch marks on the wall around the cable entry.",
    "There is a loud buzzing from inside the battery cabinet, even at night.",
    "The unit smelled of burning plastic last night for about ten minutes.",
    "One corner of the case has gone black and the paint is blistered.",
)
VW_BURIED_HAZARDS = (  # the hazard hidden inside a ticket about something else
    "By the way, the unit smelled of burning last week, not sure if that matters.",
    "Also the cabinet has been buzzing quite loudly lately.",
    "Unrelated, but the case felt really hot to the touch this afternoon.",
    "Oh and there is a slight bulge on the side of the battery, probably nothing.",
    "PS there is a faint scorch mark near the bottom of the cabinet.",
    "My neighbour said she could smell something burning near the {room}.",
    "There was a bit of smoke from the inverter on {weekday} but it stopped.",
)
VW_FIRMWARE = (  # drift: the firmware 4.1 release in July
    "Ever since the firmware 4.1 update the app shows the battery as unavailable.",
    "After updating to firmware 4.1 the gateway drops off the Wi-Fi every night.",
    "The 4.1 update installed itself on {weekday} and nothing has worked since.",
    "Is there a way to roll back firmware 4.1?",
)
VW_GENERIC = (
    "My account number is {acct}.",
    "I have attached a photo.",
    "This is the {ordinal} time I have contacted you about this.",
    "Please call me back on my mobile, I'm free after {hour}pm.",
    "I'd appreciate a quick reply.",
    "The system was installed in {month} last year.",
    "We have the {product} and the {product2}.",
    "Your chat was closed when I tried earlier.",
    "I couldn't find anything about this in the help pages.",
    "We are on the {plan} plan.",
    "I'm not very technical so please keep it simple.",
    "The house is empty during the week.",
)
VW_VAGUE = (  # tickets that say almost nothing about what they are about
    "Please call me about my account.",
    "I have a problem with my system, can someone ring me?",
    "Following up on my earlier email, still no reply.",
    "Still waiting to hear back about this.",
    "Something is not right, please get in touch.",
    "Can I speak to someone today?",
)
VW_VAGUE_SUBJECTS = ("Help", "Problem", "Follow up", "Urgent", "Question", "Please call me", "Re: your reply")
VW_GREETINGS = ("Hi,", "Hello,", "Good morning,", "Hi there,", "Dear Voltwren team,", "Hello Voltwren,")
VW_SIGNOFFS = (
    "Thanks, {first}",
    "Regards, {first}",
    "Cheers",
    "Thank you.",
    "Many thanks, {first}",
    "{first}",
)
VW_PHONE_PREFIX = ("Call note: ", "Caller said: ", "Phone call - customer reports: ", "Call summary: ")
VW_SHORT_BODIES = ("see subject", "as above", "?", "Please help", "same problem again", "call me")

VW_SECOND_PRODUCTS = ("Sunweave inverter", "Gridlatch gateway", "Hearthcell 10", "wall bracket")
VW_SLOTS: dict[str, Callable[[random.Random], str]] = {
    "month": _pick(MONTHS[:6]),
    "invoice": lambda r: f"INV-{r.randint(200000, 899999)}",
    "order": lambda r: f"SO-{r.randint(10000, 99999)}",
    "amount": lambda r: f"${r.randint(19, 640)}.{r.choice(('00', '50', '99', '20'))}",
    "amount2": lambda r: f"${r.randint(9, 45)}.{r.choice(('00', '50', '99'))}",
    "date": _date,
    "plan": _pick(VW_PLANS),
    "product": _pick(VW_PRODUCTS[:3]),
    "err": _pick(("E17", "E04", "E212", "F3", "F31", "E09", "W40", "E118")),
    "pct": _pick(("0", "5", "12", "20", "37", "50", "80", "99", "100")),
    "hour": lambda r: str(r.randint(1, 11)),
    "weekday": _pick(WEEKDAYS),
    "weekday2": _pick(WEEKDAYS[:5]),
    "room": _pick(
        ("garage", "utility room", "hallway", "loft", "basement", "outbuilding", "kitchen", "carport")
    ),
    "n": lambda r: str(r.randint(2, 11)),
    "years": lambda r: str(r.randint(2, 7)),
    "acct": lambda r: f"VA{r.randint(1000000, 9999999)}",
    "ordinal": _pick(("second", "third", "fourth")),
    "first": _pick(FIRST_NAMES),
}


def _voltwren(seed: int, n: int, n_in: int) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng([seed, 1])
    r = random.Random(seed * 1_000_003 + 1)
    total = n + n_in
    times = np.concatenate([
        _times(rng, n, 0, HISTORY_DAYS, growth=0.3),
        _times(rng, n_in, HISTORY_DAYS, INCOMING_DAYS["voltwren"], growth=0.0),
    ])  # fmt: skip
    t_days = (times - HISTORY_START).astype("timedelta64[s]").astype(np.float64) / 86400.0
    frac = np.clip(t_days / HISTORY_DAYS, 0.0, 1.0)
    probs = np.vstack([
        np.clip(VW_PRIOR[None, :] + frac[:n, None] * VW_DRIFT[None, :], 1e-3, None),
        np.repeat(VW_INCOMING_MIX[None, :], n_in, axis=0),
    ])  # fmt: skip
    q = _draw_queues(rng, probs)

    channel = _by_queue(rng, q, VW_CHANNELS, VW_CHANNEL_P)
    product = _by_queue(rng, q, VW_PRODUCTS, VW_PRODUCT_P)
    # drift: the new battery takes a growing share of battery tickets from June
    batt = np.isin(product, VW_PRODUCTS[:2])
    product[batt & (rng.random(total) < _ramp(t_days, 92, HISTORY_DAYS, 0.4))] = VW_NEW_PRODUCT
    plan = _by_queue(rng, q, VW_PLANS, VW_PLAN_P)
    region = _by_queue(rng, q, VW_REGIONS, VW_REGION_P)
    tenure = np.minimum(_lognormal_by_queue(rng, q, VW_TENURE_MEDIAN, VW_TENURE_SIGMA), 3000.0)
    inst, canc, bill = (q == VW_QUEUES.index(x) for x in ("installation", "cancellations", "billing"))
    p_open = np.where(inst, 0.85, np.where(canc, 0.18, np.where(bill, 0.06, 0.03)))
    open_orders = (rng.random(total) < p_open) * (1 + rng.poisson(np.where(inst, 0.25, 0.05)))
    tenure_missing = rng.random(total) < 0.04
    product = _blank(rng, product, 0.01)
    region = _blank(rng, region, 0.025)
    plan = _blank(rng, plan, 0.01)

    # text: per-row assembly; all randomness drawn from `r` in row order
    p_firmware = _ramp(t_days, 122, HISTORY_DAYS + 10, 0.55)  # 4.1 ships in July
    app_i, hw_i = VW_QUEUES.index("app_connectivity"), VW_QUEUES.index("hardware_fault")
    others = [x for x in VW_QUEUES if x != "safety"]
    subjects: list[str | None] = []
    bodies: list[str | None] = []
    for i in range(total):
        queue = VW_QUEUES[q[i]]
        prod = product[i] if product[i] not in (None, "none") else r.choice(VW_PRODUCTS[:3])
        prod2 = r.choice(VW_SECOND_PRODUCTS)
        prod2 = "wall bracket" if prod2 == prod else prod2
        slots = _Slots(r, VW_SLOTS, product=prod, product2=prod2, plan=plan[i] or "basic")
        buried = queue == "safety" and r.random() < 0.35
        # `surface` is what the ticket reads like; `opener` supplies its subject and first sentence
        surface = r.choice(others) if buried else queue  # buried: the hazard is one sentence in the middle
        ambiguous = r.random() < 0.12  # opens like a neighbouring queue, then gets to the point
        opener = r.choice(VW_NEIGHBOURS[surface]) if ambiguous else surface
        k = r.choices(range(1, 13), weights=LENGTH_WEIGHTS)[0]
        if channel[i] in ("chat", "app"):
            k = max(1, k // 2)
        own = VW_SENTENCES[surface]
        if queue == "safety" and not buried:
            sents = [r.choice(VW_HAZARDS)] + r.sample(own, min(k - 1, 3))
            if r.random() < 0.3:
                sents.append(r.choice(VW_HAZARDS))
        else:
            nb = VW_SENTENCES[r.choice(VW_NEIGHBOURS[surface])]
            sents = _sample_body(r, k, own, VW_GENERIC, nb, 0.25, 0.15)
            if buried:
                sents.insert(r.randint(1, len(sents)), r.choice(VW_BURIED_HAZARDS))
        if ambiguous:
            sents.insert(0, r.choice(VW_SENTENCES[opener]))
        vague = not buried and r.random() < 0.05
        if vague:  # a line or two of nothing specific, sometimes one telling sentence
            sents = r.sample(VW_VAGUE, r.randint(1, 2)) + sents[: r.randint(0, 1)]
        if (q[i] == app_i or (q[i] == hw_i and r.random() < 0.3)) and r.random() < p_firmware[i]:
            sents.insert(r.randint(0, min(1, len(sents))), r.choice(VW_FIRMWARE))
        ch = channel[i]
        if ch == "phone":
            body = r.choice(VW_PHONE_PREFIX) + " ".join(sents)
        else:
            parts = sents
            if ch in ("email", "web_form") and r.random() < 0.55:
                parts = [r.choice(VW_GREETINGS), *parts]
            if ch == "email" and r.random() < 0.6:
                parts = [*parts, r.choice(VW_SIGNOFFS)]
            body = " ".join(parts)
            if ch == "app" and r.random() < 0.5:
                body += " Sent from the Voltwren app"
        body = _typos(body.format_map(slots), r, 0.02)
        if ch == "chat" and r.random() < 0.4:
            body = body.lower()
        subject = r.choice(VW_SUBJECTS[opener]).format_map(slots)
        if queue == "safety" and not buried and r.random() < 0.2:
            subject = r.choice(VW_SUBJECTS[r.choice(others)]).format_map(slots)  # hazard only in body
        if vague and r.random() < 0.6:
            subject = r.choice(VW_VAGUE_SUBJECTS)
        subject = _typos(subject, r, 0.01)
        u = r.random()
        if u < 0.012:
            body = None
        elif u < 0.022:
            body = r.choice(VW_SHORT_BODIES)
        subjects.append(None if r.random() < 0.005 else subject)
        bodies.append(body)

    ids = _ids(rng, "VW-", total, 100_000)
    labels = np.concatenate([_noisy_labels(rng, q[:n], VW_PRIOR, LABEL_NOISE), q[n:]])
    df = pd.DataFrame({
        "ticket_id": ids,
        "received_at": np.datetime_as_string(times, unit="s"),
        "channel": channel,
        "product_line": product,
        "plan": plan,
        "region": region,
        "tenure_days": _ints(tenure, tenure_missing),
        "open_orders": open_orders.astype(np.int64),
        "subject": subjects,
        "body": bodies,
        "queue": np.asarray(VW_QUEUES, dtype=object)[labels],
    })  # fmt: skip
    return _split(df, n, "ticket_id")


# --------------------------------------------------------------------------------------------------------
# Haulmere Dispatch Software: inbound leads
# --------------------------------------------------------------------------------------------------------

HM_QUEUES = ("self_serve", "mid_market", "enterprise", "partner", "not_a_lead")
HM_PRIOR = np.array([0.35, 0.28, 0.12, 0.08, 0.17])
HM_DRIFT = np.array([-0.03, -0.01, 0.0, 0.0, 0.04])  # a spam wave builds over the summer
HM_INCOMING_MIX = np.array([0.30, 0.25, 0.18, 0.07, 0.20])  # after the September trade show
HM_SOURCES = (
    "webinar",
    "contact_form",
    "trade_show",
    "referral",
    "partner_portal",
    "organic_search",
    "paid_ad",
)
HM_COUNTRIES = (
    "United Kingdom", "Ireland", "Netherlands", "Germany", "United States", "Canada", "Australia",
    "New Zealand", "Poland", "Sweden", "South Africa",
)  # fmt: skip
HM_COUNTRY_PHRASE = {c: f"the {c}" for c in ("United Kingdom", "Netherlands", "United States")}
HM_INDUSTRIES = (
    "courier", "freight", "field_service", "waste_collection", "food_distribution", "building_supplies",
    "removals", "medical_courier", "other",
)  # fmt: skip
HM_INDUSTRY_WORDS = {
    "courier": "courier", "freight": "freight", "field_service": "field service",
    "waste_collection": "waste collection", "food_distribution": "food distribution",
    "building_supplies": "building supplies", "removals": "removals", "medical_courier": "medical courier",
    "other": "logistics",
}  # fmt: skip
HM_SOURCE_P = np.array([
    [0.08, 0.22, 0.03, 0.07, 0.01, 0.34, 0.25],
    [0.20, 0.25, 0.10, 0.12, 0.02, 0.18, 0.13],
    [0.18, 0.17, 0.28, 0.20, 0.03, 0.09, 0.05],
    [0.10, 0.15, 0.15, 0.12, 0.38, 0.07, 0.03],
    [0.04, 0.40, 0.04, 0.02, 0.02, 0.23, 0.25],
])  # fmt: skip
HM_COUNTRY_BASE = np.array([0.20, 0.05, 0.08, 0.10, 0.22, 0.07, 0.08, 0.03, 0.06, 0.05, 0.06])
HM_COUNTRY_TILT = np.array([
    [1.1, 1.2, 1.0, 0.8, 0.9, 1.0, 1.1, 1.2, 0.9, 0.9, 1.0],
    [1.0, 1.0, 1.1, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0],
    [1.0, 0.5, 1.0, 1.5, 1.4, 0.9, 0.8, 0.5, 0.8, 1.1, 0.7],
    [1.0, 1.0, 1.2, 1.2, 0.8, 1.0, 1.0, 1.0, 1.3, 1.0, 1.2],
    [0.8, 0.8, 0.8, 0.7, 1.0, 0.8, 0.9, 0.8, 1.2, 0.8, 1.8],
])  # fmt: skip
HM_INDUSTRY_P = np.array([
    [0.30, 0.08, 0.22, 0.04, 0.08, 0.06, 0.14, 0.04, 0.04],
    [0.22, 0.18, 0.16, 0.08, 0.14, 0.08, 0.06, 0.06, 0.02],
    [0.15, 0.30, 0.12, 0.12, 0.16, 0.06, 0.01, 0.06, 0.02],
    [0.14, 0.16, 0.18, 0.08, 0.10, 0.06, 0.04, 0.04, 0.20],
    [0.10, 0.05, 0.05, 0.02, 0.03, 0.02, 0.05, 0.02, 0.66],
])  # fmt: skip
HM_EMPLOYEES_MEDIAN = (8, 120, 2500, 60, 15)
HM_EMPLOYEES_SIGMA = (0.8, 0.8, 1.0, 1.0, 1.5)
HM_FLEET_RATIO = (0.6, 0.4, 0.3, 0.15, 0.2)
HM_NEIGHBOURS = {  # whose sentences and titles a queue's leads borrow
    "self_serve": ("mid_market",),
    "mid_market": ("self_serve", "enterprise"),
    "enterprise": ("mid_market", "partner"),
    "partner": ("enterprise", "mid_market"),
    "not_a_lead": ("self_serve",),
}

HM_TITLES = {
    "self_serve": (
        "Owner", "Owner-operator", "Director", "Dispatcher", "Office Manager", "Co-founder", "Operations",
        "Manager", "Founder", "Owner / driver",
    ),
    "mid_market": (
        "Operations Manager", "Fleet Manager", "Transport Manager", "Logistics Coordinator", "General Manager",
        "Head of Operations", "Dispatch Supervisor", "IT Manager", "Depot Manager",
    ),
    "enterprise": (
        "VP Operations", "Head of Logistics", "Director of Fleet Operations", "Chief Operating Officer",
        "IT Procurement Lead", "Head of Transport Systems", "Senior Procurement Manager", "Enterprise Architect",
        "Operations Director", "VP Supply Chain",
    ),
    "partner": (
        "Partner Manager", "Channel Sales Director", "Solutions Architect", "Managing Director",
        "Business Development Manager", "Integration Lead", "Alliances Manager", "Head of Partnerships",
    ),
    "not_a_lead": (
        "Student", "Software Engineer", "Marketing Consultant", "SEO Specialist", "Recruiter", "n/a",
        "Job seeker", "Account Executive", "asdf", "Graduate", "Driver", "Growth Hacker",
    ),
}  # fmt: skip

HM_SENTENCES = {
    "self_serve": (
        "We run {fleet} vans and I'm looking for something simple to plan the daily drops.",
        "Is there a monthly plan I can pay by card without talking to sales?",
        "Just signed up for the trial, how do I import my customer list?",
        "I'm a small outfit with {fleet} trucks and need basic job scheduling.",
        "What does the starter plan cost per driver?",
        "Can drivers use the app on their own phones?",
        "We currently use a whiteboard and group texts.",
        "Looking for something we can set up ourselves this week.",
        "Do you have a free tier for very small fleets?",
        "How do I cancel the trial if it isn't right for us?",
        "Can customers get a text when the driver is on the way?",
        "Is there a setup fee or is it just the monthly price?",
    ),
    "mid_market": (
        "We have {fleet} vehicles across {depots} depots and our spreadsheets no longer keep up.",
        "Could we book a demo for our operations team next week?",
        "We need proof of delivery photos and customer ETA texts.",
        "Our current dispatch tool is being retired at the end of the year.",
        "Interested in pricing for around {drivers} drivers.",
        "We'd like to see route planning and driver timesheets together.",
        "Can it export jobs and timesheets to our accounting package?",
        "We are growing fast and hired {n} new drivers this quarter.",
        "A trial for two of our depots first would be ideal.",
        "Does the driver app work offline in rural areas?",
        "We'd need an integration with our existing booking system.",
        "Please send a quote for an annual contract.",
    ),
    "enterprise": (
        "We operate {fleet} vehicles in {countries} countries and are reviewing dispatch platforms for 2027.",
        "Our procurement team will issue an RFP in {month}; please confirm you can respond.",
        "SSO via SAML and SCIM user provisioning are mandatory for us.",
        "We need an integration with our ERP and warehouse management system.",
        "Please share your security documentation and complete our vendor questionnaire.",
        "What are your uptime commitments and data residency options?",
        "We're consolidating four regional dispatch tools into one platform.",
        "Volume pricing for {drivers}+ drivers and a dedicated account manager would be required.",
        "Can you support an on-site pilot with one of our regional divisions?",
        "Any contract would go through our legal and procurement review.",
        "API rate limits matter to us, we push about {n}0,000 jobs a day.",
        "We need audit logs and role-based access for around {n}00 dispatchers.",
    ),
    "partner": (
        "We are a systems integrator working with {industry} firms and would like to resell Haulmere.",
        "Do you have a partner programme with referral commission?",
        "We build telematics hardware and want to feed our GPS data into your dispatch board.",
        "Several of our clients have asked for a dispatch tool we can bundle with our services.",
        "Is a white-label version possible for our customers?",
        "We'd like access to the partner portal and sandbox API keys.",
        "We implement ERP systems for mid-sized hauliers and are looking for a dispatch partner.",
        "Could we co-host a webinar for our customer base?",
        "What margin do resellers get on annual plans?",
        "We already look after {n}0 fleets who could move onto your platform.",
        "Our consultants would handle onboarding and first-line support.",
    ),
    "not_a_lead": (
        "I'm interested in the junior developer role I saw advertised, where do I send my CV?",
        "Are you hiring dispatchers? I have {n} years of experience.",
        "We help software companies rank higher on search engines, can I book 15 minutes?",
        "I am a student writing my thesis on last-mile delivery, could I interview someone?",
        "We offer offshore development teams at very competitive rates.",
        "Congratulations!!! You have been selected, click here to claim your prize.",
        "Cheap backlinks and guest posts, best price guaranteed.",
        "Do you sell second-hand delivery vans?",
        "I'm a driver and my employer uses your app, my login does not work.",
        "Could you sponsor our university hackathon?",
        "Please remove me from your mailing list.",
        "Hello dear, I want to discuss a business proposal with you.",
        "We can supply high-quality leads for your sales team, {n}00 contacts a month.",
    ),
}  # fmt: skip
HM_SOURCE_LINES = {
    "trade_show": (
        "We spoke briefly at your stand at the trade show.",
        "Met your team at the trade show last week.",
    ),
    "webinar": ("I attended your webinar on route planning.", "Following up from the webinar."),
    "referral": ("{first} at one of your customers pointed us to you.", "A colleague recommended Haulmere."),
    "partner_portal": ("Submitted via the partner portal.",),
    "paid_ad": ("Saw your ad.",),
}
HM_EV = (  # drift: electric vans show up in more and more enquiries
    "We're switching part of the fleet to electric vans, so routes need to respect charging windows.",
    "Does route planning take EV range and charging stops into account?",
    "Half our new vans are electric and the current tool ignores charging time.",
)
HM_SPAM_WAVE = (  # drift: a new kind of pitch that grows over the summer
    "Our AI growth agency can triple your inbound leads in 30 days.",
    "Let our AI sales agents book meetings for you, first month free.",
)
HM_GENERIC = (
    "Please get in touch.",
    "Can someone call me?",
    "What's the pricing?",
    "We are based in {country}.",
    "Found you through a search.",
    "Happy to jump on a call this week.",
    "Do you have a brochure or a price list?",
    "We looked at a couple of other tools already.",
    "Timing is flexible.",
    "Our {industry} business has been going for {n} years.",
)
HM_GREETINGS = ("Hi,", "Hello,", "Hello Haulmere team,", "Hi there,", "Good afternoon,")
HM_SIGNOFFS = ("Thanks, {first}", "Best regards, {first}", "Cheers", "Kind regards", "{first}")
HM_SHORT = ("pricing?", "demo please", "call me", "info", "hi")

HM_SLOTS: dict[str, Callable[[random.Random], str]] = {
    "month": _pick(MONTHS),
    "depots": lambda r: str(r.randint(2, 12)),
    "countries": lambda r: str(r.randint(3, 14)),
    "n": lambda r: str(r.randint(2, 9)),
    "first": _pick(FIRST_NAMES),
    "country": lambda r: HM_COUNTRY_PHRASE.get(c := r.choice(HM_COUNTRIES), c),
    "industry": _pick(tuple(HM_INDUSTRY_WORDS.values())),
}


def _haulmere(seed: int, n: int, n_in: int) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng([seed, 2])
    r = random.Random(seed * 1_000_003 + 2)
    total = n + n_in
    times = np.concatenate([
        _times(rng, n, 0, HISTORY_DAYS, growth=0.2),
        _times(rng, n_in, HISTORY_DAYS, INCOMING_DAYS["haulmere"], growth=0.0),
    ])  # fmt: skip
    t_days = (times - HISTORY_START).astype("timedelta64[s]").astype(np.float64) / 86400.0
    frac = np.clip(t_days / HISTORY_DAYS, 0.0, 1.0)
    probs = np.vstack([
        np.clip(HM_PRIOR[None, :] + frac[:n, None] * HM_DRIFT[None, :], 1e-3, None),
        np.repeat(HM_INCOMING_MIX[None, :], n_in, axis=0),
    ])  # fmt: skip
    q = _draw_queues(rng, probs)

    source = _by_queue(rng, q, HM_SOURCES, HM_SOURCE_P)
    source[rng.random(total) < _ramp(t_days, 122, HISTORY_DAYS, 0.15)] = "paid_ad"  # campaign from July
    trade_show = t_days >= HISTORY_DAYS  # the September show brings a burst of booth leads
    source[trade_show & (rng.random(total) < 0.2)] = "trade_show"
    country = _by_queue(rng, q, HM_COUNTRIES, HM_COUNTRY_BASE[None, :] * HM_COUNTRY_TILT)
    industry = _by_queue(rng, q, HM_INDUSTRIES, HM_INDUSTRY_P)
    employees = np.maximum(_lognormal_by_queue(rng, q, HM_EMPLOYEES_MEDIAN, HM_EMPLOYEES_SIGMA), 1.0)
    fleet = np.maximum(
        employees * np.asarray(HM_FLEET_RATIO)[q] * np.exp(0.4 * rng.standard_normal(total)), 1.0
    )
    nal, part = q == HM_QUEUES.index("not_a_lead"), q == HM_QUEUES.index("partner")
    emp_missing = rng.random(total) < np.where(nal, 0.25, 0.05)
    fleet_missing = rng.random(total) < np.where(nal, 0.45, np.where(part, 0.35, 0.06))
    country = _blank(rng, country, 0.02)
    industry = _blank(rng, industry, np.where(nal, 0.15, 0.03))
    fleet = np.where(nal, fleet, np.maximum(fleet, 2.0))
    fleet_int = np.rint(fleet).astype(np.int64)

    p_ev = _ramp(t_days, 60, HISTORY_DAYS + 20, 0.35)
    p_spam = _ramp(t_days, 90, HISTORY_DAYS, 0.4)
    titles: list[str | None] = []
    messages: list[str | None] = []
    for i in range(total):
        queue = HM_QUEUES[q[i]]
        fl = int(fleet_int[i]) if not fleet_missing[i] else r.randint(3, 400)
        ind = HM_INDUSTRY_WORDS[industry[i]] if industry[i] else HM_SLOTS["industry"](r)
        slots = _Slots(r, HM_SLOTS, fleet=str(fl), drivers=str(max(2, round(fl * 1.2))), industry=ind)
        if country[i]:
            slots["country"] = HM_COUNTRY_PHRASE.get(country[i], country[i])
        k = r.choices(range(1, 13), weights=LENGTH_WEIGHTS)[0]
        k = max(1, (k + 1) // 2) if queue == "not_a_lead" else k
        nb = HM_SENTENCES[r.choice(HM_NEIGHBOURS[queue])]
        p_nb = 0.0 if queue == "not_a_lead" else 0.18
        sents = _sample_body(r, min(k, 8), HM_SENTENCES[queue], HM_GENERIC, nb, 0.22, p_nb)
        if r.random() < 0.14:  # ambiguous: opens like a neighbouring queue
            sents.insert(0, r.choice(nb))
        if r.random() < 0.05:  # vague: generic lines and at most one telling sentence
            sents = r.sample(HM_GENERIC, r.randint(1, 2)) + sents[: r.randint(0, 1)]
        if queue in ("self_serve", "mid_market", "enterprise") and r.random() < p_ev[i]:
            sents.insert(r.randint(0, len(sents)), r.choice(HM_EV))
        if queue == "not_a_lead" and r.random() < p_spam[i]:
            sents = [r.choice(HM_SPAM_WAVE), *sents[: r.randint(0, 1)]]
        lines = HM_SOURCE_LINES.get(source[i])
        if lines and r.random() < 0.5:
            sents.insert(0, r.choice(lines))
        if r.random() < 0.45:
            sents.insert(0, r.choice(HM_GREETINGS))
        if r.random() < 0.4:
            sents.append(r.choice(HM_SIGNOFFS))
        message: str | None = _typos(" ".join(sents).format_map(slots), r, 0.02)
        u = r.random()
        if u < 0.015:
            message = None
        elif u < 0.025:
            message = ""
        elif u < 0.035:
            message = r.choice(HM_SHORT)
        pool = HM_TITLES[r.choice(HM_NEIGHBOURS[queue]) if r.random() < 0.18 else queue]
        title = _typos(r.choice(pool), r, 0.01)
        titles.append(None if r.random() < 0.04 else title)
        messages.append(message)

    ids = _ids(rng, "HL-", total, 40_000)
    labels = np.concatenate([_noisy_labels(rng, q[:n], HM_PRIOR, LABEL_NOISE), q[n:]])
    df = pd.DataFrame({
        "lead_id": ids,
        "received_at": np.datetime_as_string(times, unit="s"),
        "source": source,
        "country": country,
        "industry": industry,
        "employee_count": _ints(employees, emp_missing),
        "fleet_size": _ints(fleet, fleet_missing),
        "job_title": titles,
        "message": messages,
        "queue": np.asarray(HM_QUEUES, dtype=object)[labels],
    })  # fmt: skip
    return _split(df, n, "lead_id")


# --------------------------------------------------------------------------------------------------------
# public API
# --------------------------------------------------------------------------------------------------------


def _split(df: pd.DataFrame, n: int, id_col: str) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    history = df.iloc[:n].reset_index(drop=True)
    rest = df.iloc[n:].reset_index(drop=True)
    return history, rest.drop(columns=["queue"]), rest[[id_col, "queue"]].copy()


def generate(
    scenario: str, n: int, seed: int = DEFAULT_SEED, incoming: int | None = None
) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """(labelled history of n items, unlabelled incoming batch, incoming truth: id + true queue).

    `incoming` defaults to the scenario's usual ratio (1 in 12 for tickets, 1 in 10 for leads).
    History labels carry ~3% noise; the truth file does not.
    """
    if scenario not in SCENARIOS:
        raise ValueError(f"unknown scenario {scenario!r}; use one of {', '.join(SCENARIOS)}")
    if n < 1:
        raise ValueError("n must be >= 1")
    hist_default, in_default = DEFAULT_SIZES[scenario]
    n_in = max(1, round(n * in_default / hist_default)) if incoming is None else int(incoming)
    if n_in < 0:
        raise ValueError("incoming must be >= 0")
    make = _voltwren if scenario == "voltwren" else _haulmere
    return make(seed, n, n_in)


def _py(v: Any) -> Any:
    """A JSON-ready Python value (pandas/numpy missing values become null)."""
    if v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v)):
        return None
    if isinstance(v, np.integer):
        return int(v)
    return v


def _write_jsonl(df: pd.DataFrame, path: Path) -> None:
    cols = list(df.columns)
    with path.open("w", encoding="utf-8", newline="\n") as fh:
        for row in df.itertuples(index=False, name=None):
            fh.write(json.dumps(dict(zip(cols, map(_py, row), strict=True)), ensure_ascii=False) + "\n")


def write_scenario(
    scenario: str, out_dir: Path, n: int | None = None, seed: int = DEFAULT_SEED
) -> dict[str, Path]:
    """Write history, incoming and truth files for a scenario; returns {"history"|"incoming"|"truth": path}."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    frames = generate(scenario, DEFAULT_SIZES[scenario][0] if n is None else n, seed)
    paths = {
        key: out_dir / name
        for key, name in zip(("history", "incoming", "truth"), FILE_NAMES[scenario], strict=True)
    }
    for df, path in zip(frames, paths.values(), strict=True):
        if path.suffix == ".csv":
            df.to_csv(path, index=False, lineterminator="\n", encoding="utf-8")
        else:
            _write_jsonl(df, path)
    return paths


def main(argv: list[str] | None = None) -> int:
    """CLI: regenerate the demo files (defaults are committed next to this script)."""
    ap = argparse.ArgumentParser(description="Generate the invented demo scenarios (seeded, deterministic).")
    ap.add_argument("--scenario", choices=(*SCENARIOS, "all"), default="all")
    ap.add_argument("--n", type=int, default=None, help="labelled history size (default: the scenario's own)")
    ap.add_argument("--seed", type=int, default=DEFAULT_SEED)
    ap.add_argument("--out", type=Path, default=Path(__file__).resolve().parent, help="output directory")
    args = ap.parse_args(argv)
    for scenario in SCENARIOS if args.scenario == "all" else (args.scenario,):
        t0 = time.perf_counter()
        paths = write_scenario(scenario, args.out, n=args.n, seed=args.seed)
        took = time.perf_counter() - t0
        print(f"{scenario}: {', '.join(str(p) for p in paths.values())} ({took:.1f} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
