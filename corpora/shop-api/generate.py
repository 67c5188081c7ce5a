#!/usr/bin/env python3
"""Generate the shop-api demo corpus for tracewalk.

Fictional scenario: the JSON order API of "Crumbwell Bakehouse", an invented
neighbourhood bakery, served at api.crumbwell.example. Every session file is a
raw HTTP/1.1 byte stream (RFC 9112 framing, CRLF line endings): request,
response, request, response, ...

Deterministic: the only source of randomness is random.Random(SEED); running
the script twice produces byte-identical files. Stdlib only.

Usage: python3 generate.py            (writes ./sessions/NNNN.http next to this file)
"""

import json
import os
import random
import shutil

SEED = 20261130
NUM_SESSIONS = 410
HOST = "api.crumbwell.example"

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_DIR = os.path.join(HERE, "sessions")

USER_AGENTS = [
    "CrumbwellApp/3.2.0 (ios)",
    "CrumbwellApp/3.1.4 (android)",
    "crumbwell-web/2026.11",
    "CrumbwellKiosk/1.0",
]
UA_WEIGHTS = [35, 35, 25, 5]

CATEGORIES = ["bread", "pastry", "cake", "cookies", "seasonal"]

# Invented catalogue: (name, category, price in cents)
CATALOGUE_SPEC = [
    ("Seeded Rye Loaf", "bread", 640),
    ("Country Sourdough", "bread", 720),
    ("Spelt Tin Loaf", "bread", 580),
    ("Olive Fougasse", "bread", 490),
    ("Milk Bun Six-Pack", "bread", 450),
    ("Walnut Batard", "bread", 690),
    ("Potato Rolls", "bread", 390),
    ("Oat Porridge Loaf", "bread", 610),
    ("Butter Croissant", "pastry", 260),
    ("Almond Twice-Baked", "pastry", 340),
    ("Cardamom Knot", "pastry", 310),
    ("Apricot Danish", "pastry", 320),
    ("Pain Aux Raisins", "pastry", 300),
    ("Ham Cheese Turnover", "pastry", 420),
    ("Rhubarb Custard Tart", "pastry", 380),
    ("Chocolate Swirl", "pastry", 290),
    ("Lemon Drizzle Slab", "cake", 1450),
    ("Carrot Walnut Cake", "cake", 2200),
    ("Dark Chocolate Torte", "cake", 2650),
    ("Pear Ginger Loaf Cake", "cake", 1280),
    ("Victoria Layer", "cake", 1900),
    ("Honey Almond Bundt", "cake", 1750),
    ("Oat Raisin Cookie", "cookies", 150),
    ("Brown Butter Chip", "cookies", 180),
    ("Ginger Snap Tin", "cookies", 640),
    ("Shortbread Fingers", "cookies", 520),
    ("Hazelnut Sable", "cookies", 170),
    ("Miso Caramel Cookie", "cookies", 210),
    ("Spiced Star Bread", "seasonal", 1180),
    ("Chestnut Roll", "seasonal", 1320),
    ("Mulled Pear Galette", "seasonal", 1560),
    ("Cranberry Stollen Bite", "seasonal", 240),
    ("Pumpkin Seed Crown", "seasonal", 890),
]

CATALOGUE = {}
BY_CATEGORY = {c: [] for c in CATEGORIES}
for i, (name, cat, cents) in enumerate(CATALOGUE_SPEC):
    pid = 101 + i * 3  # sparse ids so that some guessed ids do not exist
    CATALOGUE[pid] = (name, cat, cents)
    BY_CATEGORY[cat].append(pid)
PAGE_SIZE = 3

FIRST = ["ana", "bo", "cyra", "dmitri", "elif", "farid", "greta", "hugo", "ines",
         "jonas", "kemi", "lars", "mira", "nils", "oona", "pavel", "quinn", "rosa",
         "sami", "tove", "ugo", "vera", "wim", "xena", "yusuf", "zofia"]
LAST = ["brindle", "copperfield", "dunmore", "elderby", "fenwick", "galloway",
        "hartwell", "ivensen", "juniper", "kestrel", "lindqvist", "moorcroft",
        "northam", "oakridge", "pembury", "quarrie", "rowntree", "saltmarsh"]
MAIL_DOMAINS = ["example.com", "example.net", "example.org", "mail.example"]

NOTES = ["", "", "", "ring the side door", "no nuts please", "pick up at 9",
         "birthday, add a candle", "slice the loaf", "extra box", "gift wrap",
         "leave with neighbour", "call on arrival"]

STATUS_FLOW = ["paid", "baking", "baking", "ready", "ready", "collected"]

REASONS = {200: "OK", 201: "Created", 400: "Bad Request", 401: "Unauthorized",
           404: "Not Found", 409: "Conflict"}


def money(cents):
    """Decimal JSON number with exactly two fraction digits."""
    return "%d.%02d" % (cents // 100, cents % 100)


class Raw:
    """A pre-rendered JSON fragment (used for decimals with two digits)."""

    def __init__(self, text):
        self.text = text


def dumps(obj):
    """Compact JSON with fixed key order (insertion order) and raw decimals."""
    if isinstance(obj, Raw):
        return obj.text
    if isinstance(obj, dict):
        return "{" + ",".join(json.dumps(k) + ":" + dumps(v) for k, v in obj.items()) + "}"
    if isinstance(obj, list):
        return "[" + ",".join(dumps(v) for v in obj) + "]"
    return json.dumps(obj, ensure_ascii=False)


class Server:
    """Global state of the fictional API, shared by all sessions."""

    def __init__(self, rng):
        self.rng = rng
        self.next_cart = 70001
        self.next_order = 88001
        self.carts = {}   # cart_id -> dict(owner, items{pid: qty}, closed)
        self.orders = {}  # order_id -> dict(owner, total, paid, status_idx)
        self.tokens = {}  # token -> customer_id


class Session:
    def __init__(self, server, rng, index):
        self.srv = server
        self.rng = rng
        self.index = index
        self.ua = rng.choices(USER_AGENTS, UA_WEIGHTS)[0]
        self.customer_id = rng.randint(5001, 5999)
        first = rng.choice(FIRST)
        last = rng.choice(LAST)
        self.email = "%s.%s@%s" % (first, last, rng.choice(MAIL_DOMAINS))
        self.token = None
        self.out = []
        self.requests = 0
        self.seen_products = []
        self.my_carts = []
        self.my_orders = []
        self.stats = {"id_refs": 0, "id_refs_own": 0, "chunked": 0, "bodies": 0,
                      "status": {}}

    # ---------------------------------------------------------------- framing
    def request(self, method, path, body=None):
        self.requests += 1
        lines = [
            "%s %s HTTP/1.1" % (method, path),
            "Host: " + HOST,
            "User-Agent: " + self.ua,
            "Accept: application/json",
        ]
        if self.token is not None:
            lines.append("Authorization: Bearer " + self.token)
        payload = b""
        if body is not None:
            text = dumps(body).encode("utf-8")
            lines.append("Content-Type: application/json")
            self.stats["bodies"] += 1
            if self.rng.random() < 0.05:
                self.stats["chunked"] += 1
                lines.append("Transfer-Encoding: chunked")
                payload = self.chunk(text)
            else:
                lines.append("Content-Length: %d" % len(text))
                payload = text
        head = "\r\n".join(lines) + "\r\n\r\n"
        self.out.append(head.encode("ascii") + payload)

    def chunk(self, data):
        parts = []
        pos = 0
        while pos < len(data):
            n = self.rng.randint(8, 40)
            piece = data[pos:pos + n]
            parts.append(b"%x\r\n" % len(piece) + piece + b"\r\n")
            pos += n
        parts.append(b"0\r\n\r\n")
        return b"".join(parts)

    def response(self, status, body):
        text = dumps(body).encode("utf-8")
        self.stats["status"][status] = self.stats["status"].get(status, 0) + 1
        head = ("HTTP/1.1 %d %s\r\nContent-Type: application/json\r\n"
                "Content-Length: %d\r\n\r\n" % (status, REASONS[status], len(text)))
        self.out.append(head.encode("ascii") + text)

    # -------------------------------------------------------------- id choice
    def pick_ref(self, own, foreign_pool, stale_base):
        """Choose an id for a request: mostly one issued in this session."""
        self.stats["id_refs"] += 1
        if own and self.rng.random() >= 0.02:
            self.stats["id_refs_own"] += 1
            # prefer the most recent id
            return own[-1] if self.rng.random() < 0.85 else self.rng.choice(own)
        if foreign_pool and self.rng.random() < 0.6:
            return self.rng.choice(foreign_pool)
        return stale_base - self.rng.randint(1, 900)

    def pick_cart(self):
        return self.pick_ref(self.my_carts, [c for c in self.srv.carts
                                             if self.srv.carts[c]["owner"] != self.index],
                             70001)

    def pick_order(self):
        return self.pick_ref(self.my_orders, [o for o in self.srv.orders
                                              if self.srv.orders[o]["owner"] != self.index],
                             88001)

    def own_cart(self, cid):
        c = self.srv.carts.get(cid)
        return c if c is not None and c["owner"] == self.index else None

    def own_order(self, oid):
        o = self.srv.orders.get(oid)
        return o if o is not None and o["owner"] == self.index else None

    # ------------------------------------------------------------- endpoints
    def login(self):
        body = {"email": self.email, "password": "pw-%04x" % self.rng.getrandbits(16)}
        self.request("POST", "/v1/sessions", body)
        if self.rng.random() < 0.04:
            self.response(401, {"error": "bad_credentials"})
            body = {"email": self.email, "password": "pw-%04x" % self.rng.getrandbits(16)}
            self.request("POST", "/v1/sessions", body)
        token = "%032x" % self.rng.getrandbits(128)
        self.srv.tokens[token] = self.customer_id
        self.response(201, {"token": token, "customer_id": self.customer_id})
        self.token = token

    def logout(self):
        self.request("DELETE", "/v1/sessions")
        self.response(200, {"logged_out": True})
        self.token = None

    def list_products(self):
        r = self.rng.random()
        if r < 0.03:
            cat = self.rng.choice(["bagels", "drinks", "Bread", "gifts"])
        else:
            cat = self.rng.choice(CATEGORIES)
        ids = BY_CATEGORY.get(cat, [])
        pages = max(1, (len(ids) + PAGE_SIZE - 1) // PAGE_SIZE)
        page = 1 if self.rng.random() < 0.6 else self.rng.randint(1, pages + 1)
        self.request("GET", "/v1/products?category=%s&page=%d" % (cat, page))
        if cat not in BY_CATEGORY:
            self.response(400, {"error": "unknown_category", "category": cat})
            return
        chunk = ids[(page - 1) * PAGE_SIZE: page * PAGE_SIZE]
        items = []
        for pid in chunk:
            name, _, cents = CATALOGUE[pid]
            items.append({"id": pid, "name": name, "price": Raw(money(cents))})
            if pid not in self.seen_products:
                self.seen_products.append(pid)
        self.response(200, {"category": cat, "page": page, "items": items,
                            "next": page + 1 if page < pages else None})

    def product_ref(self):
        if self.seen_products and self.rng.random() < 0.9:
            return self.rng.choice(self.seen_products)
        # deep link (an existing product) or a guessed id (mostly not existing)
        if self.rng.random() < 0.5:
            return self.rng.choice(sorted(CATALOGUE))
        return self.rng.randint(101, 101 + 3 * len(CATALOGUE_SPEC))

    def view_product(self, pid=None):
        if pid is None:
            pid = self.product_ref()
        self.request("GET", "/v1/products/%d" % pid)
        if pid not in CATALOGUE:
            self.response(404, {"error": "product_not_found", "product_id": pid})
            return
        name, cat, cents = CATALOGUE[pid]
        stock = self.rng.choice([0, 2, 5, 8, 12, 20, 20, 30])
        self.response(200, {"id": pid, "name": name, "category": cat,
                            "price": Raw(money(cents)), "in_stock": stock,
                            "vegan": (pid * 7) % 5 == 0})
        if pid not in self.seen_products:
            self.seen_products.append(pid)

    def browse(self, n):
        for _ in range(n):
            if not self.seen_products or self.rng.random() < 0.45:
                self.list_products()
            else:
                self.view_product()

    def create_cart(self):
        self.request("POST", "/v1/carts", {"customer_id": self.customer_id})
        cid = self.srv.next_cart
        self.srv.next_cart += 1
        self.srv.carts[cid] = {"owner": self.index, "items": {}, "closed": False}
        self.my_carts.append(cid)
        self.response(201, {"cart_id": cid})
        return cid

    def add_item(self):
        cid = self.pick_cart()
        pid = self.product_ref()
        qty = self.rng.choices([1, 2, 3, 4, 6, 12, 0], [50, 20, 10, 6, 5, 2, 2])[0]
        self.request("POST", "/v1/carts/%d/items" % cid, {"product_id": pid, "qty": qty})
        cart = self.own_cart(cid)
        if cart is None:
            self.response(404, {"error": "cart_not_found", "cart_id": cid})
        elif cart["closed"]:
            self.response(409, {"error": "cart_closed", "cart_id": cid})
        elif qty <= 0:
            self.response(400, {"error": "invalid_qty", "qty": qty})
        elif pid not in CATALOGUE:
            self.response(404, {"error": "product_not_found", "product_id": pid})
        else:
            cart["items"][pid] = cart["items"].get(pid, 0) + qty
            self.response(201, {"cart_id": cid, "product_id": pid,
                                "qty": cart["items"][pid],
                                "lines": len(cart["items"])})

    def remove_item(self, twice=False):
        cid = self.pick_cart()
        cart = self.own_cart(cid)
        if cart is not None and cart["items"] and self.rng.random() < 0.9:
            pid = self.rng.choice(sorted(cart["items"]))
        else:
            pid = self.product_ref()
        for _ in range(2 if twice else 1):
            self.request("DELETE", "/v1/carts/%d/items/%d" % (cid, pid))
            if cart is None:
                self.response(404, {"error": "cart_not_found", "cart_id": cid})
            elif cart["closed"]:
                self.response(409, {"error": "cart_closed", "cart_id": cid})
            elif pid not in cart["items"]:
                self.response(404, {"error": "item_not_in_cart", "product_id": pid})
            else:
                del cart["items"][pid]
                self.response(200, {"cart_id": cid, "removed": pid,
                                    "lines": len(cart["items"])})

    def cart_total(self, cart):
        return sum(CATALOGUE[p][2] * q for p, q in cart["items"].items())

    def get_cart(self):
        cid = self.pick_cart()
        self.request("GET", "/v1/carts/%d" % cid)
        cart = self.own_cart(cid)
        if cart is None:
            self.response(404, {"error": "cart_not_found", "cart_id": cid})
            return
        items = [{"product_id": p, "qty": q, "line_total": Raw(money(CATALOGUE[p][2] * q))}
                 for p, q in sorted(cart["items"].items())]
        self.response(200, {"cart_id": cid, "items": items,
                            "total": Raw(money(self.cart_total(cart))),
                            "closed": cart["closed"]})

    def place_order(self):
        cid = self.pick_cart()
        note = self.rng.choice(NOTES)
        self.request("POST", "/v1/orders", {"cart_id": cid, "note": note})
        cart = self.own_cart(cid)
        if cart is None:
            self.response(404, {"error": "cart_not_found", "cart_id": cid})
            return None
        if cart["closed"]:
            self.response(409, {"error": "cart_closed", "cart_id": cid})
            return None
        if not cart["items"]:
            self.response(409, {"error": "cart_empty", "cart_id": cid})
            return None
        cart["closed"] = True
        oid = self.srv.next_order
        self.srv.next_order += 1
        total = self.cart_total(cart)
        self.srv.orders[oid] = {"owner": self.index, "total": total, "paid": False,
                                "status_idx": -1}
        self.my_orders.append(oid)
        pickup = "2026-11-30T%02d:%02d:00Z" % (self.rng.randint(9, 17),
                                                self.rng.choice([0, 15, 30, 45]))
        self.response(201, {"order_id": oid, "cart_id": cid, "total": Raw(money(total)),
                            "status": "pending_payment", "pickup_at": pickup})
        return oid

    def get_order(self):
        oid = self.pick_order()
        self.request("GET", "/v1/orders/%d" % oid)
        order = self.own_order(oid)
        if order is None:
            self.response(404, {"error": "order_not_found", "order_id": oid})
            return
        self.response(200, {"order_id": oid, "total": Raw(money(order["total"])),
                            "paid": order["paid"], "status": self.status_name(order)})

    def status_name(self, order):
        if not order["paid"]:
            return "pending_payment"
        return STATUS_FLOW[max(0, min(order["status_idx"], len(STATUS_FLOW) - 1))]

    def pay(self):
        oid = self.pick_order()
        order = self.own_order(oid)
        cents = order["total"] if order is not None else self.rng.randint(300, 6000)
        wrong = order is not None and not order["paid"] and self.rng.random() < 0.04
        if wrong:
            cents += self.rng.choice([-100, 50, 1000])
        card = "ctok_%024x" % self.rng.getrandbits(96)
        self.request("POST", "/v1/orders/%d/payment" % oid,
                     {"amount": Raw(money(cents)), "currency": "EUR", "card_token": card})
        if order is None:
            self.response(404, {"error": "order_not_found", "order_id": oid})
            return False
        if order["paid"]:
            self.response(409, {"error": "already_paid", "order_id": oid})
            return False
        if wrong:
            self.response(400, {"error": "amount_mismatch",
                                "expected": Raw(money(order["total"]))})
            return False
        order["paid"] = True
        order["status_idx"] = 0
        self.response(201, {"order_id": oid, "paid": True, "amount": Raw(money(cents)),
                            "receipt": "R-%08d" % self.rng.randint(0, 99999999)})
        return True

    def get_status(self):
        oid = self.pick_order()
        self.request("GET", "/v1/orders/%d/status" % oid)
        order = self.own_order(oid)
        if order is None:
            self.response(404, {"error": "order_not_found", "order_id": oid})
            return
        if order["paid"] and self.rng.random() < 0.55:
            order["status_idx"] += 1
        status = self.status_name(order)
        eta = None
        if status in ("paid", "baking"):
            eta = self.rng.choice([5, 10, 15, 20, 30, 45])
        self.response(200, {"order_id": oid, "status": status, "eta_min": eta})


def run_session(srv, rng, index):
    s = Session(srv, rng, index)
    flow = rng.choices(["browse", "cart", "checkout", "poll", "abandoned"],
                       [24, 22, 30, 14, 10])[0]
    limit = 30

    def room(n=1):
        return s.requests + n <= limit

    if flow == "browse":
        if rng.random() < 0.5:
            s.login()
        s.browse(rng.randint(2 if s.token else 3, 10))
        if s.token and rng.random() < 0.7:
            s.logout()
        return s, flow

    s.login()
    s.browse(rng.randint(1, 4))
    s.create_cart()
    for _ in range(rng.randint(1, 6)):
        if not room(6):
            break
        s.add_item()
        r = rng.random()
        if r < 0.12:
            s.view_product()
        elif r < 0.2:
            s.list_products()
    if rng.random() < 0.25 and room(6):
        s.remove_item(twice=rng.random() < 0.12)
    if rng.random() < 0.5:
        s.get_cart()

    if flow == "abandoned":
        if rng.random() < 0.3:
            s.browse(rng.randint(1, 3))
        return s, flow  # no logout: the client simply goes away
    if flow == "cart":
        if rng.random() < 0.3 and room(4):
            # second cart, e.g. a gift order kept separate
            s.create_cart()
            s.add_item()
        if rng.random() < 0.6:
            s.logout()
        return s, flow

    oid = s.place_order()
    if oid is None:
        # empty cart or stale id: add something and try again
        s.add_item()
        oid = s.place_order()
    if rng.random() < 0.3:
        s.get_order()
    paid = s.pay()
    if not paid and rng.random() < 0.8:
        s.pay()
    if rng.random() < 0.05:
        s.pay()  # rare: the client retries a payment that already went through
    if rng.random() < 0.02:
        s.add_item()  # rare: adding to a cart that is already ordered -> 409
    if flow == "poll":
        for _ in range(rng.randint(3, 9)):
            if not room(2):
                break
            s.get_status()
    elif rng.random() < 0.6:
        s.get_status()
    if rng.random() < 0.75:
        s.logout()
    return s, flow


def main():
    rng = random.Random(SEED)
    srv = Server(rng)
    if os.path.isdir(OUT_DIR):
        shutil.rmtree(OUT_DIR)
    os.makedirs(OUT_DIR)
    totals = {"sessions": 0, "messages": 0, "bytes": 0, "id_refs": 0, "id_refs_own": 0,
              "chunked": 0, "bodies": 0, "status": {}, "flows": {}, "min_req": 99,
              "max_req": 0}
    for i in range(NUM_SESSIONS):
        s, flow = run_session(srv, rng, i)
        data = b"".join(s.out)
        with open(os.path.join(OUT_DIR, "%04d.http" % (i + 1)), "wb") as f:
            f.write(data)
        totals["sessions"] += 1
        totals["messages"] += len(s.out)
        totals["bytes"] += len(data)
        for k in ("id_refs", "id_refs_own", "chunked", "bodies"):
            totals[k] += s.stats[k]
        for k, v in s.stats["status"].items():
            totals["status"][k] = totals["status"].get(k, 0) + v
        totals["flows"][flow] = totals["flows"].get(flow, 0) + 1
        totals["min_req"] = min(totals["min_req"], s.requests)
        totals["max_req"] = max(totals["max_req"], s.requests)
    print("sessions=%d messages=%d bytes=%d requests/session=%d..%d"
          % (totals["sessions"], totals["messages"], totals["bytes"],
             totals["min_req"], totals["max_req"]))
    print("id references=%d own=%d (%.1f%%)" % (
        totals["id_refs"], totals["id_refs_own"],
        100.0 * totals["id_refs_own"] / max(1, totals["id_refs"])))
    print("request bodies=%d chunked=%d" % (totals["bodies"], totals["chunked"]))
    print("status counts=%s" % dict(sorted(totals["status"].items())))
    print("flows=%s" % dict(sorted(totals["flows"].items())))


if __name__ == "__main__":
    main()
