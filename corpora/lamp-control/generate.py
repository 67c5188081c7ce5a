#!/usr/bin/env python3
"""Generate the lamp-control demo corpus for tracewalk.

Fictional scenario: "Heronlight" lighting hubs speak HLP, a small line-based
text protocol. A client (wall panel, phone app, script) connects, says HELLO,
authenticates and then sets, fades, reads and subscribes to lighting zones.
Each session file holds the client command lines and the hub reply lines in
the order they travelled, one message per line, LF line endings.

Hub reply lines always match  ^(OK|ERR|VAL|EVT)( |$)  and client lines never do.

Deterministic: the only randomness is random.Random(SEED). Stdlib only.

Usage: python3 generate.py            (writes ./sessions/NNNN.txt next to this file)
"""

import os
import random
import re
import shutil

SEED = 4242_2026
NUM_SESSIONS = 450
MAX_LINES = 40

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_DIR = os.path.join(HERE, "sessions")

REPLY_RE = re.compile(r"^(OK|ERR|VAL|EVT)( |$)")

ZONE_NAMES = ["Hall", "Kitchen", "Dining", "Lounge", "Stairs", "Landing", "Study",
              "Bedroom 1", "Bedroom 2", "Bath", "Porch", "Garden Path", "Garage",
              "Pantry", "Attic", "Workshop"]

# Invented hubs: (hub name, number of zones)
HUBS = [("heron-h16-lakeside", 16), ("heron-h8-mill-lane", 8),
        ("heron-h12-old-school", 12), ("heron-h4-boathouse", 4),
        ("heron-h16-tannery", 16), ("heron-h8-orchard", 6)]

CLIENTS = [("wallpanel-hall", 20), ("wallpanel-kitchen", 14), ("heronapp-ios", 22),
           ("heronapp-android", 22), ("hlp-cli", 8), ("nightly-scheduler", 9),
           ("presence-bridge", 5)]

PROTOS = [("2.1", 80), ("2.0", 12), ("2.2", 6), ("1.9", 2)]

SCENE_NAMES = ["Movie night", "Dinner", "All off", "Morning", "Reading corner",
               "Cleaning", "Late snack", "Party", "Away", "Bedtime", "Sunday brunch",
               "Garden \\\"glow\\\"", "Welcome home", "Night path"]


def level_value(rng):
    r = rng.random()
    if r < 0.25:
        return 0
    if r < 0.45:
        return 50
    if r < 0.65:
        return 100
    if r < 0.68:
        return rng.choice([101, 120, 255])  # out of range: rejected
    return rng.choice([5, 10, 15, 20, 25, 30, 35, 40, 60, 65, 70, 75, 80, 85, 90, 95])


class Hub:
    def __init__(self, name, zones, rng):
        self.name = name
        self.zones = zones
        self.levels = {z: rng.choice([0, 0, 0, 50, 100]) for z in range(1, zones + 1)}
        self.next_scene = rng.randint(3, 9)  # a few scenes exist from earlier use


class Session:
    def __init__(self, hub, rng):
        self.hub = hub
        self.rng = rng
        self.lines = []
        self.subs = []
        self.scenes = []
        self.authed = False
        self.client = rng.choices([c for c, _ in CLIENTS], [w for _, w in CLIENTS])[0]

    def room(self):
        return MAX_LINES - len(self.lines)

    def cmd(self, text):
        assert not REPLY_RE.match(text), text
        self.lines.append(text)

    def reply(self, text):
        assert REPLY_RE.match(text), text
        self.lines.append(text)

    def zone_arg(self):
        r = self.rng.random()
        if self.subs and r < 0.45:
            return self.rng.choice(self.subs)
        if r < 0.97:
            return self.rng.randint(1, self.hub.zones)
        return self.rng.choice([0, 17, self.hub.zones + 1, 16])

    def check_zone(self, z):
        if z < 1 or z > 16:
            self.reply("ERR 400 zone out of range")
            return False
        if z > self.hub.zones:
            self.reply("ERR 404 no zone=%d" % z)
            return False
        return True

    def maybe_wall_event(self):
        """Someone flips a wall switch on a subscribed zone."""
        if self.subs and self.rng.random() < 0.08 and self.room() > 3:
            z = self.rng.choice(self.subs)
            lvl = self.rng.choice([0, 100, 50])
            self.hub.levels[z] = lvl
            src = self.rng.choice(["wall", "wall", "schedule", "client"])
            self.reply("EVT zone=%d level=%d src=%s" % (z, lvl, src))

    def change_event(self, z, src):
        if z in self.subs:
            self.reply("EVT zone=%d level=%d src=%s" % (z, self.hub.levels[z], src))

    # ------------------------------------------------------------- commands
    def hello(self):
        proto = self.rng.choices([p for p, _ in PROTOS], [w for _, w in PROTOS])[0]
        self.cmd("HELLO %s %s" % (self.client, proto))
        if proto == "1.9":
            self.reply("ERR 505 proto unsupported min=2.0")
            proto = "2.1"
            self.cmd("HELLO %s %s" % (self.client, proto))
        self.reply("OK HELLO hub=%s proto=%s zones=%d" % (self.hub.name, proto, self.hub.zones))

    def auth(self):
        self.cmd("AUTH %032x" % self.rng.getrandbits(128))
        if self.rng.random() < 0.05:
            self.reply("ERR 401 bad token")
            if self.rng.random() < 0.3:
                return False
            self.cmd("AUTH %032x" % self.rng.getrandbits(128))
        self.reply("OK AUTH role=%s" % self.rng.choice(["user", "user", "user", "admin"]))
        self.authed = True
        return True

    def list_zones(self):
        self.cmd("LIST ZONES")
        for z in range(1, self.hub.zones + 1):
            self.reply('VAL zone=%d name="%s" level=%d' % (z, ZONE_NAMES[z - 1], self.hub.levels[z]))
        self.reply("OK ZONES count=%d" % self.hub.zones)

    def sub(self):
        z = self.zone_arg()
        self.cmd("SUB zone=%d" % z)
        if not self.check_zone(z):
            return
        if z in self.subs:
            self.reply("OK SUB zone=%d already" % z)
            return
        self.subs.append(z)
        self.reply("OK SUB zone=%d" % z)

    def unsub(self):
        if self.subs and self.rng.random() < 0.95:
            z = self.rng.choice(self.subs)
        else:
            z = self.rng.randint(1, self.hub.zones)
        self.cmd("UNSUB zone=%d" % z)
        if z in self.subs:
            self.subs.remove(z)
            self.reply("OK UNSUB zone=%d" % z)
        else:
            self.reply("ERR 409 not subscribed zone=%d" % z)

    def set_level(self):
        z = self.zone_arg()
        lvl = level_value(self.rng)
        self.cmd("SET zone=%d level=%d" % (z, lvl))
        if not self.check_zone(z):
            return
        if lvl > 100:
            self.reply("ERR 400 level out of range")
            return
        self.hub.levels[z] = lvl
        self.reply("OK SET zone=%d level=%d" % (z, lvl))
        self.change_event(z, "self")

    def fade(self):
        z = self.zone_arg()
        lvl = level_value(self.rng)
        ms = self.rng.choice([250, 500, 1000, 1500, 2000, 3000, 5000, 10000, 60000])
        self.cmd("FADE zone=%d level=%d ms=%d" % (z, lvl, ms))
        if not self.check_zone(z):
            return
        if lvl > 100:
            self.reply("ERR 400 level out of range")
            return
        self.reply("OK FADE zone=%d level=%d ms=%d" % (z, lvl, ms))
        self.hub.levels[z] = lvl
        if ms <= 3000:
            self.change_event(z, "fade")

    def get(self):
        z = self.zone_arg()
        self.cmd("GET zone=%d" % z)
        if not self.check_zone(z):
            return
        self.reply("VAL zone=%d level=%d" % (z, self.hub.levels[z]))

    def scene_save(self):
        name = self.rng.choice(SCENE_NAMES)
        self.cmd('SCENE SAVE name="%s"' % name)
        sid = self.hub.next_scene
        self.hub.next_scene += 1
        self.scenes.append(sid)
        self.reply("OK scene id=%d" % sid)

    def scene_recall(self):
        if self.scenes and self.rng.random() < 0.97:
            sid = self.rng.choice(self.scenes)
        else:
            sid = self.hub.next_scene + self.rng.randint(5, 40)  # never issued
        self.cmd("SCENE RECALL id=%d" % sid)
        if sid in self.scenes:
            self.reply("OK RECALL id=%d" % sid)
            for z in sorted(self.subs):
                if self.rng.random() < 0.5:
                    self.hub.levels[z] = self.rng.choice([0, 50, 100, 30, 70])
                    self.change_event(z, "scene")
        else:
            self.reply("ERR 404 no scene id=%d" % sid)

    def ping(self):
        self.cmd("PING")
        self.reply("OK PONG")

    def bye(self):
        self.cmd("BYE")
        self.reply("OK BYE")


def run_session(hub, rng):
    s = Session(hub, rng)
    s.hello()
    if not s.auth():
        if rng.random() < 0.5:
            s.bye()
        return s, "auth-failed"
    target = rng.choice([4, 6, 8, 10, 12, 14, 18, 22, 26, 30, 34, 38])
    kind = rng.choices(["panel", "watcher", "scenes", "quick"], [40, 20, 20, 20])[0]
    if kind == "watcher" or rng.random() < 0.3:
        if s.room() > hub.zones + 6 and rng.random() < 0.7:
            s.list_zones()
    actions = {
        "panel": [("SET", 40), ("FADE", 15), ("GET", 15), ("SUB", 8), ("PING", 4),
                  ("SAVE", 3), ("RECALL", 3), ("UNSUB", 3)],
        "watcher": [("SUB", 30), ("GET", 20), ("PING", 15), ("UNSUB", 12), ("SET", 15),
                    ("FADE", 5), ("SAVE", 1), ("RECALL", 2)],
        "scenes": [("SET", 20), ("FADE", 10), ("SAVE", 22), ("RECALL", 25), ("GET", 8),
                   ("SUB", 8), ("UNSUB", 2), ("PING", 5)],
        "quick": [("SET", 50), ("GET", 25), ("FADE", 15), ("PING", 10)],
    }[kind]
    names = [a for a, _ in actions]
    weights = [w for _, w in actions]
    abrupt = rng.random() < 0.06
    while len(s.lines) < target and s.room() > 6:
        a = rng.choices(names, weights)[0]
        if a == "RECALL" and not s.scenes:
            a = "SAVE"
        if a == "UNSUB" and not s.subs and rng.random() < 0.9:
            a = "SUB"
        {"SET": s.set_level, "FADE": s.fade, "GET": s.get, "SUB": s.sub,
         "UNSUB": s.unsub, "PING": s.ping, "SAVE": s.scene_save,
         "RECALL": s.scene_recall}[a]()
        s.maybe_wall_event()
    if abrupt:
        return s, "abrupt"
    if s.subs and rng.random() < 0.4 and s.room() > 2:
        s.unsub()
    s.bye()
    return s, kind


def main():
    rng = random.Random(SEED)
    hubs = [Hub(n, z, rng) for n, z in HUBS]
    if os.path.isdir(OUT_DIR):
        shutil.rmtree(OUT_DIR)
    os.makedirs(OUT_DIR)
    n_lines = n_replies = n_bytes = 0
    kinds = {}
    lo, hi = 99, 0
    for i in range(NUM_SESSIONS):
        hub = rng.choices(hubs, [30, 20, 20, 10, 12, 8])[0]
        s, kind = run_session(hub, rng)
        assert 4 <= len(s.lines) <= MAX_LINES, len(s.lines)
        text = "".join(line + "\n" for line in s.lines)
        data = text.encode("ascii")
        with open(os.path.join(OUT_DIR, "%04d.txt" % (i + 1)), "wb") as f:
            f.write(data)
        n_lines += len(s.lines)
        n_replies += sum(1 for l in s.lines if REPLY_RE.match(l))
        n_bytes += len(data)
        kinds[kind] = kinds.get(kind, 0) + 1
        lo, hi = min(lo, len(s.lines)), max(hi, len(s.lines))
    print("sessions=%d lines=%d (commands=%d replies=%d) bytes=%d lines/session=%d..%d"
          % (NUM_SESSIONS, n_lines, n_lines - n_replies, n_replies, n_bytes, lo, hi))
    print("kinds=%s" % dict(sorted(kinds.items())))


if __name__ == "__main__":
    main()
