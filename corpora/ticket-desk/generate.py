#!/usr/bin/env python3
"""Generate the ticket-desk demo corpus for tracewalk.

Fictional scenario: "Spoke & Sprocket", an invented bicycle workshop, runs a
repair-ticket desk that speaks a small line protocol. Counter terminals, the
workshop tablet and a self-service kiosk connect, open tickets for bikes, add
notes and parts, assign mechanics, look tickets up and close them. The desk
issues a random six-digit id for each ticket it opens; every later command
about that ticket names the id. Each session file holds the client command
lines and the desk reply lines in the order they travelled, LF line endings.

Desk reply lines always match  ^(OK|ERR|VAL)( |$)  and client lines never do.
The replies are those of a correct desk (examples/ticket_desk.rs is the same
desk with a planted bug).

Deterministic: the only randomness is random.Random(SEED). Stdlib only.

Usage: python3 generate.py            (writes ./sessions/NNNN.txt next to this file)
"""

import os
import random
import re
import shutil

SEED = 2026_1130
NUM_SESSIONS = 320

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_DIR = os.path.join(HERE, "sessions")

REPLY_RE = re.compile(r"^(OK|ERR|VAL)( |$)")

CLIENTS = [("counter-front", 30), ("counter-back", 18), ("workshop-tablet", 28),
           ("kiosk-lobby", 10), ("desk-cli", 6)]
ISSUES = ["flat", "brakes", "gears", "chain", "lights", "wheel-true", "bearings"]
MECHANICS = ["ines", "tobias", "maren", "kofi", "yusuf", "edda"]
SKUS = ["P-%04d" % n for n in (1012, 1044, 1107, 1180, 2203, 2241, 2290, 3005, 3016,
                                 3177, 4410, 4452, 5120, 5188, 6031, 6090, 7204, 7260)]
NOTES = ["customer waits", "call before fitting", "rear wheel only", "squeaks uphill",
         "needs by friday", "second visit", "child seat fitted", "no rush",
         "check the \\\"new\\\" tyre"]


def price_of(sku):
    h = 7
    for b in sku.encode():
        h = (h * 31 + b) % (1 << 32)
    return h % 4000 + 300


class Desk:
    """The desk's replies (a correct desk: parts added after assignment cost no fitting)."""

    def __init__(self, rng):
        self.rng = rng
        self.tickets = {}

    def new_id(self):
        while True:
            i = self.rng.randint(100000, 999999)
            if i not in self.tickets:
                return i

    def lookup(self, tid):
        t = self.tickets.get(tid)
        if t is None:
            return None, "ERR 404 no ticket=%d" % tid
        if t["closed"]:
            return None, "ERR 409 ticket=%d closed" % tid
        return t, None

    def handle(self, cmd, args):
        if cmd == "HELLO":
            return ["OK HELLO desk=spoke-and-sprocket"]
        if cmd == "OPEN":
            tid = self.new_id()
            self.tickets[tid] = {"issue": args["issue"], "parts": [], "mechanic": None,
                                 "sheet": [], "closed": False}
            return ["OK OPEN ticket=%d" % tid]
        if cmd == "BYE":
            return ["OK BYE"]
        tid = args["ticket"]
        t, err = self.lookup(tid)
        if err:
            return [err]
        if cmd == "NOTE":
            return ["OK NOTE ticket=%d" % tid]
        if cmd == "PART":
            t["parts"].append(args["sku"])
            return ["OK PART ticket=%d parts=%d" % (tid, len(t["parts"]))]
        if cmd == "ASSIGN":
            t["sheet"] = [15 + price_of(p) % 45 for p in t["parts"]]
            t["mechanic"] = args["mechanic"]
            return ["OK ASSIGN ticket=%d mechanic=%s" % (tid, args["mechanic"])]
        if cmd == "STATUS":
            state = "assigned" if t["mechanic"] else "open"
            return ["VAL ticket=%d state=%s parts=%d" % (tid, state, len(t["parts"]))]
        if cmd == "CLOSE":
            if t["mechanic"]:
                total = sum(price_of(p) + (t["sheet"][i] * 90 if i < len(t["sheet"]) else 0)
                            for i, p in enumerate(t["parts"]))
            else:
                total = sum(price_of(p) for p in t["parts"])
            t["closed"] = True
            return ["OK CLOSE ticket=%d invoice=%d.%02d" % (tid, total // 100, total % 100)]
        raise ValueError(cmd)


def weighted(rng, pairs):
    total = sum(w for _, w in pairs)
    r = rng.uniform(0, total)
    for value, w in pairs:
        r -= w
        if r <= 0:
            return value
    return pairs[-1][0]


def render(cmd, args):
    parts = [cmd]
    for k, v in args.items():
        if k == "text":
            parts.append('%s="%s"' % (k, v))
        else:
            parts.append("%s=%s" % (k, v))
    return " ".join(parts)


def plan(rng):
    """A list of commands of one session; ticket arguments are slots 'T0', 'T1' (filled from
    the ids the desk issued) and, rarely, a stale id from another session."""
    kind = weighted(rng, [("intake", 34), ("quick", 18), ("workshop", 26), ("late-part", 7),
                          ("lookup", 9), ("two-bikes", 6)])
    steps = []

    def opened(t):
        steps.append(("OPEN", {"bike": rng.randint(1000, 99999), "issue": rng.choice(ISSUES)}, t))

    def on(cmd, t, **extra):
        steps.append((cmd, extra, t))

    if kind == "intake":
        opened("T0")
        if rng.random() < 0.5:
            on("NOTE", "T0", text=rng.choice(NOTES))
        for _ in range(rng.randint(0, 3)):
            on("PART", "T0", sku=rng.choice(SKUS))
        if rng.random() < 0.3:
            on("STATUS", "T0")
        if rng.random() < 0.7:
            on("ASSIGN", "T0", mechanic=rng.choice(MECHANICS))
            if rng.random() < 0.4:
                on("CLOSE", "T0")
    elif kind == "quick":
        opened("T0")
        on("ASSIGN", "T0", mechanic=rng.choice(MECHANICS))
        if rng.random() < 0.3:
            on("STATUS", "T0")
        on("CLOSE", "T0")
    elif kind == "workshop":
        opened("T0")
        for _ in range(rng.randint(1, 3)):
            on("PART", "T0", sku=rng.choice(SKUS))
        on("ASSIGN", "T0", mechanic=rng.choice(MECHANICS))
        on("STATUS", "T0")
        if rng.random() < 0.5:
            on("NOTE", "T0", text=rng.choice(NOTES))
        on("CLOSE", "T0")
    elif kind == "late-part":
        # A part turns up after the mechanic started: rare, and the desk handles it.
        opened("T0")
        if rng.random() < 0.5:
            on("PART", "T0", sku=rng.choice(SKUS))
        on("ASSIGN", "T0", mechanic=rng.choice(MECHANICS))
        on("PART", "T0", sku=rng.choice(SKUS))
        if rng.random() < 0.4:
            on("STATUS", "T0")
        if rng.random() < 0.6:
            on("CLOSE", "T0")
    elif kind == "lookup":
        opened("T0")
        on("STATUS", "T0")
        if rng.random() < 0.6:
            on("NOTE", "T0", text=rng.choice(NOTES))
        on("STATUS", "T0")
    else:
        opened("T0")
        opened("T1")
        on("PART", "T0", sku=rng.choice(SKUS))
        on("PART", "T1", sku=rng.choice(SKUS))
        on("ASSIGN", "T1", mechanic=rng.choice(MECHANICS))
        on("ASSIGN", "T0", mechanic=rng.choice(MECHANICS))
        if rng.random() < 0.5:
            on("CLOSE", "T1")
    return steps


def session(rng):
    desk = Desk(rng)
    client = weighted(rng, CLIENTS)
    lines = ["HELLO %s" % client]
    lines += desk.handle("HELLO", {})
    ids = {}
    for cmd, args, t in plan(rng):
        args = dict(args)
        if cmd != "OPEN":
            # About 3% of references name a stale ticket from an earlier visit.
            tid = rng.randint(100000, 999999) if rng.random() < 0.03 else ids[t]
            args = {"ticket": tid, **args}
        lines.append(render(cmd, args))
        replies = desk.handle(cmd, args)
        if cmd == "OPEN":
            ids[t] = int(replies[0].split("ticket=")[1])
        lines += replies
    if rng.random() < 0.9:
        lines.append("BYE")
        lines += desk.handle("BYE", {})
    return lines


def main():
    rng = random.Random(SEED)
    shutil.rmtree(OUT_DIR, ignore_errors=True)
    os.makedirs(OUT_DIR)
    sessions = commands = replies = size = 0
    for n in range(1, NUM_SESSIONS + 1):
        lines = session(rng)
        text = "".join(line + "\n" for line in lines)
        with open(os.path.join(OUT_DIR, "%04d.txt" % n), "w", newline="\n") as f:
            f.write(text)
        sessions += 1
        r = sum(1 for line in lines if REPLY_RE.match(line))
        replies += r
        commands += len(lines) - r
        size += len(text.encode())
    print("| sessions | lines | client commands | desk replies | bytes |")
    print("|---|---|---|---|---|")
    print("| %d | %d | %d | %d | %s |" % (sessions, commands + replies, commands, replies,
                                        format(size, ",")))


if __name__ == "__main__":
    main()
