#!/usr/bin/env python3
"""Generate the events demo corpus for tracewalk.

Fictional scenario: "Nookpost", an invented network of self-service parcel
lockers. Every locker reports what happens during a visit (a courier filling
doors, a customer picking up, a failed code entry...) as JSON events. The
back office receives one combined stream: events.jsonl, one compact JSON
object per line (LF line endings), all visits interleaved in time order.

A visit (session) is identified by the "visit" field, the second key of every
line; split the stream with the regex  "visit":"([0-9a-f-]+)"

Deterministic: the only randomness is random.Random(SEED). Stdlib only.

Usage: python3 generate.py            (writes ./events.jsonl next to this file)
"""

import heapq
import json
import os
import random

SEED = 73_2026_11
NUM_VISITS = 440

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_FILE = os.path.join(HERE, "events.jsonl")

DAY = "2026-11-30"

CITIES = ["Westmere", "Brackenford", "Holloway Cross", "Sandpiper Quay", "Ormsby",
          "Little Dunham", "Calder Rise"]
DOC_NETS = ["192.0.2.", "198.51.100.", "203.0.113."]
FIRMWARE = ["4.2.1", "4.2.1", "4.2.1", "4.3.0", "4.1.7"]
DOOR_SIZES = [("S", 40), ("M", 35), ("L", 18), ("XL", 7)]
NAMES = ["amara", "bjorn", "celia", "dario", "esme", "felix", "gwen", "hamid", "ida",
         "jules", "kofi", "lena", "marek", "noor", "otto", "priya", "ravi", "selma",
         "tariq", "una", "viktor", "wren", "yara", "zeno"]
MAIL_DOMAINS = ["example.com", "example.net", "example.org"]
CODE_ALPHABET = "23456789ABCDEFGHJKMNPQRSTUVWXYZ"
REJECT_REASONS = ["unknown_code", "expired", "wrong_locker", "unreadable"]
HELP_REASONS = ["code_not_working", "door_stuck", "parcel_missing", "screen_frozen"]
AGENTS = ["agent-lotte", "agent-brann", "agent-mika", None]
TAGS = ["courier", "customer", "return", "retry", "help", "fee", "chilled", "bulk"]


class Raw:
    """Pre-rendered JSON number text (keeps a fixed number of decimals)."""

    def __init__(self, text):
        self.text = text


def dumps(obj):
    if isinstance(obj, Raw):
        return obj.text
    if isinstance(obj, dict):
        return "{" + ",".join(json.dumps(k) + ":" + dumps(v) for k, v in obj.items()) + "}"
    if isinstance(obj, list):
        return "[" + ",".join(dumps(v) for v in obj) + "]"
    return json.dumps(obj, ensure_ascii=False)


def dec(value, digits):
    return Raw("%.*f" % (digits, value))


def uuid4_like(rng):
    n = rng.getrandbits(128)
    n = (n & ~(0xF << 76)) | (0x4 << 76)      # version 4
    n = (n & ~(0x3 << 62)) | (0x2 << 62)      # RFC 4122 variant
    h = "%032x" % n
    return "%s-%s-%s-%s-%s" % (h[:8], h[8:12], h[12:16], h[16:20], h[20:])


def stamp(ms):
    s, ms = divmod(ms, 1000)
    m, s = divmod(s, 60)
    h, m = divmod(m, 60)
    return "%sT%02d:%02d:%02d.%03dZ" % (DAY, h, m, s, ms)


class Locker:
    def __init__(self, rng, i):
        self.id = "NP-%04d" % rng.randint(100, 9999)
        self.city = CITIES[i % len(CITIES)]
        self.bay = rng.randint(1, 6)
        self.ip = rng.choice(DOC_NETS) + str(rng.randint(2, 254))
        self.fw = rng.choice(FIRMWARE)
        self.doors = rng.choice([24, 36, 48, 60])
        self.chilled = rng.random() < 0.3
        self.battery = rng.randint(40, 100)


class Visit:
    def __init__(self, rng, locker, start_ms):
        self.rng = rng
        self.locker = locker
        self.visit = uuid4_like(rng)
        self.t = start_ms
        self.events = []
        self.tags = []
        self.parcels = 0
        self.fee_paid = 0.0

    def emit(self, type_, **fields):
        obj = {"visit": self.visit, "at": stamp(self.t), "type": type_}
        obj.update(fields)
        self.events.append((self.t, dumps(obj)))
        self.t += self.rng.randint(1500, 25000)

    def email(self):
        return "%s.%s%d@%s" % (self.rng.choice(NAMES), self.rng.choice(NAMES)[:1],
                               self.rng.randint(1, 99), self.rng.choice(MAIL_DOMAINS))

    def code(self):
        c = "".join(self.rng.choice(CODE_ALPHABET) for _ in range(8))
        return c[:4] + "-" + c[4:]

    def parcel_id(self):
        return "NP%010d" % self.rng.randint(0, 9999999999)

    def arrive(self):
        lk = self.locker
        lk.battery = max(5, lk.battery - self.rng.randint(0, 2))
        self.emit("arrive", locker=lk.id, site={"city": lk.city, "bay": lk.bay},
                  ip=lk.ip, fw=lk.fw, battery_pct=lk.battery,
                  online=self.rng.random() < 0.96)

    def scan(self, method, max_fail):
        """Scan codes until one is accepted; returns False if the user gives up."""
        attempt = 1
        while True:
            ok = attempt > max_fail
            self.emit("scan_code", method=method, code=self.code(), attempt=attempt,
                      ok=ok, reason=None if ok else self.rng.choice(REJECT_REASONS))
            if ok:
                return True
            if attempt >= 3:
                return False
            attempt += 1

    def door_cycle(self, action):
        lk = self.locker
        door = self.rng.randint(1, lk.doors)
        size = self.rng.choices([s for s, _ in DOOR_SIZES], [w for _, w in DOOR_SIZES])[0]
        chilled = lk.chilled and self.rng.random() < 0.4
        if chilled and "chilled" not in self.tags:
            self.tags.append("chilled")
        temp = dec(self.rng.uniform(2.0, 7.5), 1) if chilled else None
        if self.rng.random() < 0.04:
            self.emit("door_jam", door=door, code=self.rng.choice(["E_LATCH", "E_SENSOR"]),
                      retry=True)
            if "retry" not in self.tags:
                self.tags.append("retry")
            if self.rng.random() < 0.3:
                self.help_call("door_stuck")
            door = self.rng.randint(1, lk.doors)
        self.emit("door_open", door=door, size=size, temp_c=temp)
        if action == "drop":
            dims = sorted([self.rng.randint(5, 60) for _ in range(3)], reverse=True)
            cod = dec(self.rng.uniform(5, 80), 2) if self.rng.random() < 0.1 else None
            self.emit("parcel_drop", door=door, parcel=self.parcel_id(),
                      weight_kg=dec(self.rng.uniform(0.1, 18.0), 2), dims_cm=dims,
                      notify=self.email(), cod=cod)
        else:
            self.emit("parcel_pick", door=door, parcel=self.parcel_id(),
                      dwell_h=dec(self.rng.uniform(0.2, 96.0), 1),
                      fee=dec(self.fee_paid, 2), recipient=self.email())
        self.parcels += 1
        forced = self.rng.random() < 0.02
        self.emit("door_close", door=door, open_ms=self.rng.randint(1800, 45000),
                  forced=forced)

    def pay_fee(self):
        amount = self.rng.choice([1.5, 2.0, 2.5, 3.0, 4.5, 6.0])
        approved = self.rng.random() < 0.9
        self.emit("pay_fee", amount=dec(amount, 2), currency="EUR",
                  method=self.rng.choice(["card", "card", "app"]), approved=approved,
                  terminal={"id": "T-%s" % self.locker.id[3:], "ip": self.locker.ip})
        self.fee_paid = amount
        if "fee" not in self.tags:
            self.tags.append("fee")
        if not approved:
            self.emit("pay_fee", amount=dec(amount, 2), currency="EUR", method="card",
                      approved=True,
                      terminal={"id": "T-%s" % self.locker.id[3:], "ip": self.locker.ip})

    def help_call(self, reason):
        if "help" not in self.tags:
            self.tags.append("help")
        self.emit("help_call", reason=reason, agent=self.rng.choice(AGENTS),
                  queue_s=self.rng.randint(0, 240))

    def leave(self, start, outcome):
        self.emit("leave", duration_s=(self.t - start) // 1000, outcome=outcome,
                  parcels=self.parcels, tags=self.tags)


def run_visit(rng, locker, start_ms):
    v = Visit(rng, locker, start_ms)
    kind = rng.choices(["courier", "pickup", "return", "lost"], [22, 52, 16, 10])[0]
    v.tags.append({"courier": "courier", "pickup": "customer", "return": "return",
                   "lost": "customer"}[kind])
    v.arrive()
    if kind == "courier":
        v.scan("nfc", 0 if rng.random() < 0.95 else 1)
        n = rng.choice([1, 2, 3, 4, 5, 6, 8, 10])
        if n >= 5:
            v.tags.append("bulk")
        for _ in range(n):
            v.door_cycle("drop")
        v.leave(start_ms, "done")
    elif kind == "pickup":
        fails = rng.choices([0, 1, 2], [85, 11, 4])[0]
        v.scan(rng.choice(["qr", "qr", "keypad"]), fails)
        if fails:
            v.tags.append("retry")
        if rng.random() < 0.12:
            v.pay_fee()
        for _ in range(rng.choices([1, 2, 3], [80, 15, 5])[0]):
            v.door_cycle("pick")
        if rng.random() < 0.03:
            v.help_call("parcel_missing")
        v.leave(start_ms, "done")
    elif kind == "return":
        v.scan("qr", 0 if rng.random() < 0.92 else 1)
        v.pay_fee()
        v.door_cycle("drop")
        v.leave(start_ms, "done")
    else:
        v.scan(rng.choice(["qr", "keypad"]), 3)
        v.tags.append("retry")
        if rng.random() < 0.5:
            v.help_call(rng.choice(HELP_REASONS))
        v.leave(start_ms, rng.choice(["aborted", "timeout"]))
    return v


def main():
    rng = random.Random(SEED)
    lockers = [Locker(rng, i) for i in range(28)]
    streams = []
    kinds_seen = 0
    for i in range(NUM_VISITS):
        locker = rng.choice(lockers)
        start = rng.randint(6 * 3600 * 1000, 21 * 3600 * 1000)
        v = run_visit(rng, locker, start)
        streams.append([(t, i, k, line) for k, (t, line) in enumerate(v.events)])
        kinds_seen += 1
    merged = heapq.merge(*streams)
    lines = [line for _, _, _, line in merged]
    data = ("\n".join(lines) + "\n").encode("utf-8")
    with open(OUT_FILE, "wb") as f:
        f.write(data)
    types = {}
    for line in lines:
        t = json.loads(line)["type"]
        types[t] = types.get(t, 0) + 1
    print("visits=%d lines=%d bytes=%d" % (kinds_seen, len(lines), len(data)))
    print("types=%s" % dict(sorted(types.items())))


if __name__ == "__main__":
    main()
