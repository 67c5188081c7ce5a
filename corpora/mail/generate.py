#!/usr/bin/env python3
"""Generate the mail demo corpus for tracewalk.

Fictional scenario: four invented inbound mail servers accept mail for their
own domains from office workstations, web applications, mailing-list robots
and a few old devices that only know HELO. Every session file holds one SMTP
dialogue (RFC 5321): server reply lines and client lines in the order they
travelled, CRLF line endings.

Server lines always match  ^[0-9]{3}[ -]  and client lines (commands and
message content) never do. Only RFC 2606 names are used for hosts and
addresses (example.com/net/org and names under .example/.test/.invalid).

Deterministic: the only randomness is random.Random(SEED). Stdlib only.

Usage: python3 generate.py            (writes ./sessions/NNNN.txt next to this file)
"""

import datetime
import os
import random
import re
import shutil

SEED = 5321_0030
NUM_SESSIONS = 440

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_DIR = os.path.join(HERE, "sessions")

REPLY_RE = re.compile(r"^[0-9]{3}[ -]")

# fixed English names, independent of the process locale
DAYS = ["Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun"]
MONTHS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"]


class Server:
    def __init__(self, host, domains, banner, size_limit, extensions, enhanced):
        self.host = host
        self.domains = domains
        self.banner = banner
        self.size_limit = size_limit
        self.extensions = extensions
        self.enhanced = enhanced
        self.queue_seq = 0

    def code(self, basic, enhanced, text):
        if self.enhanced and enhanced:
            return "%s %s %s" % (basic, enhanced, text)
        return "%s %s" % (basic, text)


SERVERS = [
    Server("mx.example.net", ["example.net"], "ESMTP ready", 26214400,
           ["PIPELINING", "SIZE 26214400", "8BITMIME", "ENHANCEDSTATUSCODES", "HELP"], True),
    Server("mail.example.org", ["example.org", "staff.example.org"],
           "ESMTP postroom service", 10485760,
           ["SIZE 10485760", "8BITMIME", "HELP"], False),
    Server("inbound.harbourmail.example", ["harbourmail.example"], "ESMTP harbourmail",
           52428800, ["PIPELINING", "SIZE 52428800", "ENHANCEDSTATUSCODES", "8BITMIME",
                      "DSN", "HELP"], True),
    Server("mx1.lists.test", ["lists.test"], "ESMTP list relay", 5242880,
           ["SIZE 5242880", "PIPELINING", "ENHANCEDSTATUSCODES"], True),
]
SERVER_WEIGHTS = [35, 25, 25, 15]

CLIENT_HOSTS = ["ws-%03d.office.example.com", "app%d.billing.example.org",
                "relay%d.corp.example", "build-%02d.ci.example.net",
                "robot%d.lists.test", "printer-%d.floor2.example.com",
                "kiosk%d.library.example", "mta%d.outbound.example.net"]

SENDER_DOMAINS = ["example.com", "example.org", "billing.example.org", "corp.example",
                  "lists.test", "library.example", "example.net", "shop.example"]
LOCALS = ["alma", "bertrand", "chiara", "dev", "noreply", "elsa", "frode", "gabi",
          "hannes", "ilse", "joon", "karin", "leo", "mona", "nadia", "orla", "pim",
          "reports", "sanne", "tomasz", "ulla", "vivi", "walt", "billing", "helpdesk",
          "alerts", "news", "yannick", "zora"]
UNKNOWN_LOCALS = ["former.staff", "no-such-user", "typo.tomasz", "old-alias", "xyzzy",
                  "postmaster-test", "returned"]

SUBJECTS = ["Weekly rota for the front desk", "Invoice 2026-11 attached",
            "Re: lunch on Thursday?", "Build finished: nightly", "Printer tray empty",
            "Your library loan is due soon", "Minutes from the planning call",
            "Password reset request", "Re: Re: parking permits", "Digest: 14 new posts",
            "Reminder: quarterly review", "Meter reading received",
            "Out of office until Monday", "New comment on your draft",
            "Undelivered mail returned to sender", "Photos from the garden day"]

WORDS = ("the a our your this next last new old quick short long brief team office "
         "report list draft note plan meeting invoice reading garden desk shelf "
         "printer build rota review permit loan copy update change reply thanks "
         "please see attached below above tomorrow today Thursday Monday evening "
         "morning kind regards cheers again soon later first second third item "
         "items page pages summary numbers totals budget room floor door key "
         "coffee tea lunch parking bike rack window light heating schedule").split()

BODY_OPENERS = ["Hi all,", "Hello,", "Dear colleague,", "Good morning,", "Hi there,",
                "Team,", "Hey,"]
BODY_CLOSERS = ["Thanks,", "Best regards,", "Cheers,", "Kind regards,", "--", "Talk soon,"]
DOT_LINES = [".. and that is all for now", ".signature follows below",
             ". (this line starts with a dot)", "...more to come next week",
             ".", ".hidden-folder was cleaned up"]


class Session:
    def __init__(self, rng, server):
        self.rng = rng
        self.srv = server
        self.lines = []
        self.queue_seq = 0

    def s(self, text):
        assert REPLY_RE.match(text), text
        self.lines.append(text)

    def c(self, text):
        assert not REPLY_RE.match(text), text
        self.lines.append(text)

    def ok(self, enhanced="2.0.0", text="Ok"):
        self.s(self.srv.code("250", enhanced, text))

    def addr(self, domains, local=None):
        if local is None:
            local = self.rng.choice(LOCALS)
            if self.rng.random() < 0.2:
                local += "." + self.rng.choice(LOCALS)
        return "%s@%s" % (local, self.rng.choice(domains))

    def sentence(self, lo, hi):
        words = [self.rng.choice(WORDS) for _ in range(self.rng.randint(lo, hi))]
        line = " ".join(words)
        line = line[0].upper() + line[1:]
        if self.rng.random() < 0.15:
            line = "%s %d %s" % (line, self.rng.randint(1, 999), self.rng.choice(WORDS))
        return line + self.rng.choice([".", ".", ".", "?", "!", ":"])

    def body_line(self):
        r = self.rng.random()
        if r < 0.05:
            return self.rng.choice(DOT_LINES)
        if r < 0.10:
            # numbers at line start; never "NNN " or "NNN-" (see REPLY_RE)
            return "%d. %s" % (self.rng.randint(1, 9), self.sentence(3, 8))
        if r < 0.13:
            return ""
        return self.sentence(4, 14)


def make_message(sess, sender, rcpts, when):
    rng = sess.rng
    lines = []
    lines.append("From: %s" % (sender or "MAILER-DAEMON@%s" % sess.srv.host))
    lines.append("To: %s" % ", ".join(rcpts[:3]))
    if rng.random() < 0.2:
        lines.append("Cc: %s" % sess.addr(SENDER_DOMAINS))
    lines.append("Subject: %s" % rng.choice(SUBJECTS))
    lines.append("Date: %s, %02d %s %d %02d:%02d:%02d +0000" % (
        DAYS[when.weekday()], when.day, MONTHS[when.month - 1], when.year,
        when.hour, when.minute, when.second))
    lines.append("Message-ID: <%04d%02d%02d%02d%02d%02d.%08x@%s>" % (
        when.year, when.month, when.day, when.hour, when.minute, when.second,
        rng.getrandbits(32), (sender or "x@" + sess.srv.host).split("@")[1]))
    if rng.random() < 0.5:
        lines.append("MIME-Version: 1.0")
        lines.append("Content-Type: text/plain; charset=utf-8")
    lines.append("")
    lines.append(rng.choice(BODY_OPENERS))
    for _ in range(rng.randint(1, 10)):
        lines.append(sess.body_line())
    lines.append(rng.choice(BODY_CLOSERS))
    lines.append(sender.split("@")[0] if sender else "the mail system")
    # dot-stuffing (RFC 5321 section 4.5.2)
    return [("." + l) if l.startswith(".") else l for l in lines]


def transaction(sess, esmtp, when):
    """One mail transaction. Returns True if a message was accepted."""
    rng = sess.rng
    srv = sess.srv
    bounce = rng.random() < 0.04
    sender = "" if bounce else sess.addr(SENDER_DOMAINS)
    size = rng.choice([900, 1800, 2400, 4000, 12000, 60000, 250000, 1200000])
    if rng.random() < 0.02:
        size = srv.size_limit + rng.randint(1, 9999999)
    if esmtp and rng.random() < 0.7:
        sess.c("MAIL FROM:<%s> SIZE=%d" % (sender, size))
        if size > srv.size_limit:
            sess.s(srv.code("552", "5.3.4", "Message size exceeds fixed limit"))
            return False
    else:
        sess.c("MAIL FROM:<%s>" % sender)
    sess.ok("2.1.0", "Sender ok")
    accepted = []
    for _ in range(rng.choices([1, 2, 3, 4, 6], [60, 20, 10, 6, 4])[0]):
        r = rng.random()
        if r < 0.08:
            rcpt = sess.addr(srv.domains, rng.choice(UNKNOWN_LOCALS))
            sess.c("RCPT TO:<%s>" % rcpt)
            sess.s(srv.code("550", "5.1.1", "<%s>: Recipient address rejected: User unknown"
                            % rcpt))
        elif r < 0.11:
            rcpt = sess.addr(["example.com", "elsewhere.invalid", "shop.example"])
            sess.c("RCPT TO:<%s>" % rcpt)
            sess.s(srv.code("550", "5.7.1", "<%s>: Relay access denied" % rcpt))
        else:
            rcpt = sess.addr(srv.domains)
            sess.c("RCPT TO:<%s>" % rcpt)
            sess.ok("2.1.5", "Recipient ok")
            accepted.append(rcpt)
    if not accepted:
        sess.c("RSET")
        sess.ok("2.0.0", "Reset state")
        return False
    sess.c("DATA")
    sess.s("354 End data with <CR><LF>.<CR><LF>")
    for line in make_message(sess, sender, accepted, when):
        sess.c(line)
    sess.c(".")
    qid = "%010X" % rng.getrandbits(40)
    sess.ok("2.0.0", "Ok: queued as %s" % qid)
    return True


def run_session(rng, server, start):
    sess = Session(rng, server)
    pattern = rng.choice(CLIENT_HOSTS)
    client = pattern % rng.randint(1, 120) if "%" in pattern else pattern
    legacy = rng.random() < 0.06
    sess.s("220 %s %s" % (server.host, server.banner))
    if legacy:
        sess.c("HELO %s" % client)
        sess.s("250 %s" % server.host)
    else:
        sess.c("EHLO %s" % client)
        ext = server.extensions
        sess.s("250-%s Hello %s" % (server.host, client))
        for e in ext[:-1]:
            sess.s("250-%s" % e)
        sess.s("250 %s" % ext[-1])
    when = start
    n_tx = rng.choices([0, 1, 2, 3, 5], [4, 70, 16, 7, 3])[0]
    for i in range(n_tx):
        if rng.random() < 0.08:
            sess.c("NOOP")
            sess.ok("2.0.0", "Ok")
        if rng.random() < 0.03:
            who = rng.choice(LOCALS)
            sess.c("VRFY %s" % who)
            sess.s(server.code("252", "2.1.5", "Cannot VRFY user, but will accept message"))
        if rng.random() < 0.015:
            sess.c("HELP")
            sess.s(server.code("214", "2.0.0",
                               "Commands: HELO EHLO MAIL RCPT DATA RSET NOOP VRFY QUIT"))
        transaction(sess, not legacy, when)
        when += datetime.timedelta(seconds=rng.randint(1, 40))
        if i + 1 < n_tx and rng.random() < 0.1:
            sess.c("RSET")
            sess.ok("2.0.0", "Reset state")
    if n_tx == 0 and rng.random() < 0.5:
        sess.c("NOOP")
        sess.ok("2.0.0", "Ok")
    sess.c("QUIT")
    sess.s(server.code("221", "2.0.0", "%s closing connection" % server.host))
    return sess, legacy, n_tx


def main():
    rng = random.Random(SEED)
    if os.path.isdir(OUT_DIR):
        shutil.rmtree(OUT_DIR)
    os.makedirs(OUT_DIR)
    base = datetime.datetime(2026, 11, 30, 7, 0, 0)
    n_lines = n_server = n_bytes = n_legacy = n_tx = 0
    for i in range(NUM_SESSIONS):
        server = rng.choices(SERVERS, SERVER_WEIGHTS)[0]
        start = base + datetime.timedelta(seconds=rng.randint(0, 12 * 3600))
        sess, legacy, tx = run_session(rng, server, start)
        data = "".join(l + "\r\n" for l in sess.lines).encode("ascii")
        with open(os.path.join(OUT_DIR, "%04d.txt" % (i + 1)), "wb") as f:
            f.write(data)
        n_lines += len(sess.lines)
        n_server += sum(1 for l in sess.lines if REPLY_RE.match(l))
        n_bytes += len(data)
        n_legacy += legacy
        n_tx += tx
    print("sessions=%d lines=%d (server=%d client=%d) bytes=%d legacy_helo=%d transactions=%d"
          % (NUM_SESSIONS, n_lines, n_server, n_lines - n_server, n_bytes, n_legacy, n_tx))


if __name__ == "__main__":
    main()
