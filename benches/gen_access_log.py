#!/usr/bin/env python3
"""Write an invented web-server access log for tracewalk benchmarks.

Usage: python3 benches/gen_access_log.py SIZE_MB OUTFILE [--seed N]

Fictional site: "Tidewater Tool Library" (www.tidewater-tools.example), a
lending library for tools. One request per line in combined-log style:

  IP - - [30/Nov/2026:08:15:02 +0000] "GET /tools/4821?tab=specs HTTP/1.1" 200 5123 "REFERRER" "UA"

Client addresses come from the RFC 5737 documentation ranges. The output is
about SIZE_MB mebibytes (it stops at the first line that reaches the size),
LF line endings, ASCII only. Deterministic for a given seed (default 1).
Stdlib only. Output is benchmark input: do not commit it.
"""

import argparse
import datetime
import random
import sys

SITE = "https://www.tidewater-tools.example"
MONTHS = ["Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec"]

USER_AGENTS = [
    "TidewaterApp/5.4 (ios; 18.1)",
    "TidewaterApp/5.3 (android; 15)",
    "Browsa/128.0 (desktop; linux)",
    "Browsa/127.2 (desktop; windows)",
    "Pagefinch/17.3 (macos)",
    "Pagefinch/17.3 (ipados)",
    "tidewater-sync/0.9",
    "shelfcrawler/2.1 (+https://www.tidewater-tools.example/bots)",
]
UA_WEIGHTS = [22, 20, 18, 14, 10, 6, 5, 5]

CATEGORIES = ["drills", "saws", "sanders", "ladders", "garden", "clamps", "measuring",
              "painting", "plumbing", "welding", "woodwork", "cleaning"]
SEARCH_WORDS = ["drill", "saw", "ladder", "hedge", "trimmer", "sander", "clamp", "level",
                "tile", "cutter", "pressure", "washer", "jigsaw", "router", "stud", "finder",
                "wheelbarrow", "paint", "sprayer", "chisel"]
STATIC = ["/static/app.4f2a9c.js", "/static/app.4f2a9c.css", "/static/logo.svg",
          "/static/fonts/sail-regular.woff2", "/favicon.ico", "/static/vendor.81d0e2.js"]


def build_kinds(rng):
    """Each kind returns (method, path, status, bytes, referrer)."""
    ri = rng.randint
    ch = rng.choice

    def home():
        return "GET", "/", 200, ri(14000, 18000), ch(["-", "-", SITE + "/"])

    def category():
        c = ch(CATEGORIES)
        page = ri(1, 12)
        return ("GET", "/tools?category=%s&page=%d" % (c, page), 200, ri(8000, 30000),
                SITE + "/")

    def tool():
        tid = ri(1000, 9999)
        tab = ch(["", "", "?tab=specs", "?tab=reviews", "?tab=availability"])
        status = 200 if tid % 23 else 404
        return ("GET", "/tools/%d%s" % (tid, tab), status,
                ri(6000, 22000) if status == 200 else 512,
                SITE + "/tools?category=%s&page=%d" % (ch(CATEGORIES), ri(1, 5)))

    def search():
        q = "+".join(ch(SEARCH_WORDS) for _ in range(ri(1, 3)))
        return "GET", "/search?q=%s&page=%d" % (q, ri(1, 4)), 200, ri(3000, 26000), SITE + "/"

    def static():
        p = ch(STATIC)
        if rng.random() < 0.4:
            return "GET", p, 304, 0, SITE + "/"
        return "GET", p, 200, ri(2000, 350000), SITE + "/"

    def api_get():
        mid = ri(10000, 99999)
        return ("GET", "/api/v2/members/%d/loans?status=%s" % (mid, ch(["active", "overdue", "all"])),
                ch([200, 200, 200, 200, 401]), ri(120, 4800), "-")

    def api_post():
        return ("POST", "/api/v2/loans", ch([201, 201, 201, 400, 409]), ri(90, 600),
                SITE + "/tools/%d" % ri(1000, 9999))

    def reserve():
        return ("POST", "/tools/%d/reserve" % ri(1000, 9999), ch([302, 302, 302, 409]),
                ri(0, 300), SITE + "/tools/%d?tab=availability" % ri(1000, 9999))

    def loan_return():
        return ("PUT", "/api/v2/loans/%d/return" % ri(200000, 999999), ch([204, 204, 404]),
                0, "-")

    def account():
        return ("GET", "/account/history?year=%d&month=%d" % (ch([2025, 2026]), ri(1, 12)),
                ch([200, 200, 302]), ri(3000, 12000), SITE + "/account")

    def missing():
        return ("GET", ch(["/tools/old-%d.html" % ri(1, 400), "/wp-admin.invalid",
                           "/images/tool-%d.jpg" % ri(1, 99999)]), 404, 512, "-")

    kinds = [home, category, tool, search, static, api_get, api_post, reserve,
             loan_return, account, missing]
    weights = [8, 14, 22, 9, 20, 9, 4, 3, 3, 5, 3]
    return kinds, weights


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("size_mb", type=float, help="approximate output size in MiB")
    ap.add_argument("outfile", help="output path ('-' for stdout)")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)

    rng = random.Random(args.seed)
    target = int(args.size_mb * 1024 * 1024)

    ips = []
    for net in ("192.0.2.", "198.51.100.", "203.0.113."):
        ips.extend(net + str(i) for i in range(1, 255))
    ua_pool = [ua for ua, w in zip(USER_AGENTS, UA_WEIGHTS) for _ in range(w)]
    kinds, weights = build_kinds(rng)
    kind_pool = [k for k, w in zip(kinds, weights) for _ in range(w)]
    # every client keeps its user agent
    ip_ua = {ip: rng.choice(ua_pool) for ip in ips}
    # a few busy clients send most of the traffic
    ip_pool = ips + rng.sample(ips, 60) * 6

    t = datetime.datetime(2026, 11, 30, 0, 0, 0)
    second = datetime.timedelta(seconds=1)

    def fmt(ts):
        return "%02d/%s/%d:%02d:%02d:%02d +0000" % (ts.day, MONTHS[ts.month - 1], ts.year,
                                                    ts.hour, ts.minute, ts.second)

    stamp = fmt(t)
    out = sys.stdout.buffer if args.outfile == "-" else open(args.outfile, "wb")
    written = 0
    rand = rng.random
    pick = rng.choice
    buf = []
    buf_bytes = 0
    chunk = 8 * 1024 * 1024
    try:
        while written < target:
            if rand() < 0.08:
                t += second
                stamp = fmt(t)
            ip = pick(ip_pool)
            method, path, status, size, ref = pick(kind_pool)()
            line = '%s - - [%s] "%s %s HTTP/1.1" %d %d "%s" "%s"\n' % (
                ip, stamp, method, path, status, size, ref, ip_ua[ip])
            buf.append(line)
            n = len(line)
            buf_bytes += n
            written += n
            if buf_bytes >= chunk:
                out.write("".join(buf).encode("ascii"))
                buf = []
                buf_bytes = 0
        if buf:
            out.write("".join(buf).encode("ascii"))
    finally:
        if out is not sys.stdout.buffer:
            out.close()
        else:
            out.flush()


if __name__ == "__main__":
    main()
