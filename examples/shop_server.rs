//! A tiny HTTP/1.1 server for the invented Crumbwell bakery API of `corpora/shop-api`,
//! listening on 127.0.0.1 only. A demo target for `tracewalk hunt --tcp`: small,
//! deterministic, std only, one connection at a time, state per connection, and three planted
//! bugs that only rare but plausible sessions reach. None of the 410 sessions of the corpus
//! triggers them.
//!
//! To let generated sessions get deep without carrying ids between messages, a connection has
//! one cart and one order, and any id in a path names them (404 only when there is none).
//! Payment amounts are not checked.
//!
//! 1. An uncommon order of requests: pay an order, then remove an item from its cart. Removing
//!    from a paid order refunds the line, and the refund assumes the item is in the order.
//!    Minimal session: login, create cart, add item, place order, pay, remove an item the
//!    order does not hold (6 messages).
//! 2. A transition never seen in training: any request after logout (`DELETE /v1/sessions`
//!    always ends a training session). Logout forgets the customer but not that the connection
//!    authenticated, so creating a cart with a bearer token finds no customer.
//!    Minimal session: login, logout, create cart (3 messages).
//! 3. A slot value at a boundary: an item quantity of 2^31 or so. Quantities are checked to be
//!    at least 1 but have no upper bound, and the order total overflows when the order is
//!    placed. Minimal session: login, create cart, add item with a huge qty, place order
//!    (4 messages).
//!
//! Build: `rustc --edition 2024 -O examples/shop_server.rs -o shop_server` (or `cargo build
//! --example shop_server`). Run: `./shop_server --port 7400`.

use std::io::{BufRead, BufReader, Read, Write};
use std::net::{TcpListener, TcpStream};
use std::time::Duration;

const MAX_HEAD: usize = 64 * 1024;
const MAX_BODY: usize = 1 << 20;
const CATEGORIES: [&str; 5] = ["bread", "cake", "cookies", "pastry", "seasonal"];

struct Request {
    method: String,
    path: String,
    query: String,
    authorized: bool,
    close: bool,
    body: Vec<u8>,
}

struct Line {
    product: u32,
    qty: u32,
    price_cents: u32,
}

struct Cart {
    lines: Vec<Line>,
    closed: bool,
}

struct Order {
    lines: Vec<Line>,
    total_cents: u32,
    paid: bool,
}

#[derive(Default)]
struct Connection {
    customer: Option<u32>,
    authenticated: bool,
    cart: Option<Cart>,
    order: Option<Order>,
}

/// Price of a catalogue product (ids 101..=199 exist).
fn price_cents(product: u32) -> Option<u32> {
    (101..=199).contains(&product).then(|| 150 + (product % 37) * 40)
}

/// The text of a number or string value of `"key":` in a flat JSON object.
fn json_value<'a>(body: &'a str, key: &str) -> Option<&'a str> {
    let at = body.find(&format!("\"{key}\":"))? + key.len() + 3;
    let rest = body[at..].trim_start();
    if let Some(s) = rest.strip_prefix('"') {
        return s.split('"').next();
    }
    let end = rest.find([',', '}']).unwrap_or(rest.len());
    Some(rest[..end].trim())
}

fn reply(status: u16, body: &str) -> (u16, String) {
    (status, body.to_string())
}

fn error(status: u16, code: &str) -> (u16, String) {
    (status, format!("{{\"error\":\"{code}\"}}"))
}

impl Connection {
    /// The logged-in customer. Planted bug 2: logout clears the customer but not
    /// `authenticated`, so an authorised request after logout gets here with none.
    fn customer(&self) -> u32 {
        self.customer.expect("authenticated requests have a customer")
    }

    fn handle(&mut self, r: &Request) -> (u16, String) {
        let segments: Vec<&str> = r.path.trim_start_matches('/').split('/').collect();
        let needs_auth = !matches!(
            (r.method.as_str(), segments.as_slice()),
            ("POST", ["v1", "sessions"]) | ("GET", ["v1", "products", ..])
        );
        if needs_auth && !(r.authorized && self.authenticated) {
            return error(401, "unauthorized");
        }
        let body = String::from_utf8_lossy(&r.body).into_owned();
        match (r.method.as_str(), segments.as_slice()) {
            ("POST", ["v1", "sessions"]) => {
                let Some(email) = json_value(&body, "email") else { return error(400, "bad_request") };
                let id = 5000 + (email.bytes().map(u32::from).sum::<u32>() % 1000);
                self.customer = Some(id);
                self.authenticated = true;
                reply(201, &format!("{{\"token\":\"{id:032x}\",\"customer_id\":{id}}}"))
            }
            ("DELETE", ["v1", "sessions"]) => {
                self.customer = None;
                reply(200, "{\"ok\":true}")
            }
            ("GET", ["v1", "products"]) => {
                let param = |name: &str| {
                    r.query.split('&').find_map(|kv| kv.strip_prefix(name).and_then(|v| v.strip_prefix('=')))
                };
                let category = param("category").unwrap_or("bread");
                let Some(c) = CATEGORIES.iter().position(|&k| k == category) else {
                    return error(400, "unknown_category");
                };
                let page: u32 = match param("page").unwrap_or("1").parse() {
                    Ok(p) if (1..=9).contains(&p) => p,
                    _ => return error(400, "invalid_page"),
                };
                let first = 101 + c as u32 * 15 + (page - 1) * 3;
                let items: Vec<String> = (first..first + 3)
                    .filter_map(|id| {
                        price_cents(id)
                            .map(|p| format!("{{\"id\":{id},\"price\":{}.{:02}}}", p / 100, p % 100))
                    })
                    .collect();
                reply(
                    200,
                    &format!(
                        "{{\"category\":\"{category}\",\"page\":{page},\"items\":[{}]}}",
                        items.join(",")
                    ),
                )
            }
            ("GET", ["v1", "products", id]) => match id.parse().ok().and_then(price_cents) {
                Some(p) => reply(200, &format!("{{\"id\":{id},\"price\":{}.{:02}}}", p / 100, p % 100)),
                None => error(404, "product_not_found"),
            },
            ("POST", ["v1", "carts"]) => {
                let customer = self.customer();
                self.cart = Some(Cart { lines: Vec::new(), closed: false });
                reply(201, &format!("{{\"cart_id\":{},\"customer_id\":{customer}}}", 70001))
            }
            ("GET", ["v1", "carts", _]) => match &self.cart {
                Some(c) => reply(
                    200,
                    &format!("{{\"cart_id\":70001,\"lines\":{},\"closed\":{}}}", c.lines.len(), c.closed),
                ),
                None => error(404, "cart_not_found"),
            },
            ("POST", ["v1", "carts", _, "items"]) => {
                let Some(cart) = &mut self.cart else { return error(404, "cart_not_found") };
                if cart.closed {
                    return error(409, "cart_closed");
                }
                let Some(product) = json_value(&body, "product_id").and_then(|v| v.parse::<u32>().ok())
                else {
                    return error(400, "bad_request");
                };
                let Some(price) = price_cents(product) else { return error(404, "product_not_found") };
                // Planted bug 3: at least 1, but no upper bound.
                let qty = match json_value(&body, "qty").and_then(|v| v.parse::<u32>().ok()) {
                    Some(q) if q >= 1 => q,
                    _ => return error(400, "invalid_qty"),
                };
                cart.lines.push(Line { product, qty, price_cents: price });
                reply(201, &format!("{{\"cart_id\":70001,\"lines\":{}}}", cart.lines.len()))
            }
            ("DELETE", ["v1", "carts", _, "items", product]) => {
                let Some(cart) = &mut self.cart else { return error(404, "cart_not_found") };
                let product: u32 = product.parse().unwrap_or(0);
                if cart.closed {
                    match &mut self.order {
                        Some(order) if order.paid => {
                            // Planted bug 1: a paid order is refunded line by line, assuming the
                            // item is in it.
                            let at = order.lines.iter().position(|l| l.product == product).unwrap();
                            let line = order.lines.remove(at);
                            order.total_cents -= line.price_cents * line.qty;
                            return reply(200, "{\"refunded\":true}");
                        }
                        _ => return error(409, "cart_closed"),
                    }
                }
                match cart.lines.iter().position(|l| l.product == product) {
                    Some(at) => {
                        cart.lines.remove(at);
                        reply(200, "{\"removed\":true}")
                    }
                    None => error(404, "item_not_in_cart"),
                }
            }
            ("POST", ["v1", "orders"]) => {
                let customer = self.customer();
                let Some(cart) = &mut self.cart else { return error(404, "cart_not_found") };
                if cart.closed {
                    return error(409, "already_ordered");
                }
                if cart.lines.is_empty() {
                    return error(409, "cart_empty");
                }
                let mut total: u32 = 0;
                for l in &cart.lines {
                    // Planted bug 3 shows here: the line total overflows.
                    total = total.strict_add(l.price_cents.strict_mul(l.qty));
                }
                cart.closed = true;
                let lines = cart
                    .lines
                    .iter()
                    .map(|l| Line { product: l.product, qty: l.qty, price_cents: l.price_cents })
                    .collect();
                self.order = Some(Order { lines, total_cents: total, paid: false });
                reply(
                    201,
                    &format!(
                        "{{\"order_id\":880001,\"customer_id\":{customer},\"total\":{}.{:02}}}",
                        total / 100,
                        total % 100
                    ),
                )
            }
            ("GET", ["v1", "orders", _]) | ("GET", ["v1", "orders", _, "status"]) => match &self.order {
                Some(o) => reply(
                    200,
                    &format!(
                        "{{\"order_id\":880001,\"status\":\"{}\"}}",
                        if o.paid { "baking" } else { "awaiting_payment" }
                    ),
                ),
                None => error(404, "order_not_found"),
            },
            ("POST", ["v1", "orders", _, "payment"]) => match &mut self.order {
                Some(o) if o.paid => error(409, "already_paid"),
                Some(o) => {
                    o.paid = true;
                    reply(200, "{\"status\":\"paid\"}")
                }
                None => error(404, "order_not_found"),
            },
            _ => error(404, "not_found"),
        }
    }
}

/// Reads one request; `Ok(None)` at a clean end of the connection, `Err` for a malformed one.
fn read_request(reader: &mut impl BufRead) -> Result<Option<Request>, &'static str> {
    let mut head = Vec::new();
    loop {
        let mut line = Vec::new();
        let n = reader
            .by_ref()
            .take((MAX_HEAD - head.len()) as u64 + 1)
            .read_until(b'\n', &mut line)
            .map_err(|_| "read")?;
        if n == 0 {
            return if head.is_empty() { Ok(None) } else { Err("truncated head") };
        }
        if head.is_empty() && (line == b"\r\n" || line == b"\n") {
            continue; // empty lines before a request line are allowed
        }
        head.extend_from_slice(&line);
        if head.len() > MAX_HEAD {
            return Err("head too large");
        }
        if line == b"\r\n" || line == b"\n" {
            break;
        }
    }
    let text = String::from_utf8_lossy(&head).into_owned();
    let mut lines = text.lines();
    let mut start = lines.next().unwrap_or("").split(' ');
    let (method, target, version) =
        (start.next().unwrap_or(""), start.next().unwrap_or(""), start.next().unwrap_or(""));
    if method.is_empty() || !target.starts_with('/') || !version.starts_with("HTTP/1.") {
        return Err("bad request line");
    }
    let (path, query) = target.split_once('?').unwrap_or((target, ""));
    let mut request = Request {
        method: method.into(),
        path: path.into(),
        query: query.into(),
        authorized: false,
        close: false,
        body: Vec::new(),
    };
    let (mut length, mut chunked) = (0usize, false);
    for field in lines {
        let Some((name, value)) = field.split_once(':') else { continue };
        let (name, value) = (name.trim().to_ascii_lowercase(), value.trim());
        match name.as_str() {
            "content-length" => length = value.parse().map_err(|_| "bad content-length")?,
            "transfer-encoding" => chunked = value.eq_ignore_ascii_case("chunked"),
            "authorization" => request.authorized = value.starts_with("Bearer "),
            "connection" => request.close = value.eq_ignore_ascii_case("close"),
            _ => {}
        }
    }
    if chunked {
        loop {
            let mut size_line = String::new();
            reader.by_ref().take(64).read_line(&mut size_line).map_err(|_| "read")?;
            let size = usize::from_str_radix(size_line.trim().split(';').next().unwrap_or(""), 16)
                .map_err(|_| "bad chunk size")?;
            if request.body.len() + size > MAX_BODY {
                return Err("body too large");
            }
            let mut chunk = vec![0u8; size + 2];
            reader.read_exact(&mut chunk).map_err(|_| "truncated chunk")?;
            request.body.extend_from_slice(&chunk[..size]);
            if size == 0 {
                break;
            }
        }
    } else {
        if length > MAX_BODY {
            return Err("body too large");
        }
        request.body = vec![0u8; length];
        reader.read_exact(&mut request.body).map_err(|_| "truncated body")?;
    }
    Ok(Some(request))
}

fn write_response(stream: &mut impl Write, status: u16, body: &str, close: bool) -> std::io::Result<()> {
    let reason = match status {
        200 => "OK",
        201 => "Created",
        400 => "Bad Request",
        401 => "Unauthorized",
        404 => "Not Found",
        409 => "Conflict",
        _ => "Error",
    };
    let connection = if close { "Connection: close\r\n" } else { "" };
    let text = format!(
        "HTTP/1.1 {status} {reason}\r\nContent-Type: application/json\r\n{connection}Content-Length: {}\r\n\r\n{body}",
        body.len()
    );
    stream.write_all(text.as_bytes())
}

fn serve(stream: TcpStream) {
    let _ = stream.set_read_timeout(Some(Duration::from_secs(10)));
    let Ok(writer) = stream.try_clone() else { return };
    serve_connection(BufReader::new(stream), writer);
}

/// Serves one connection: requests from `reader`, responses to `writer`, until the reader ends,
/// a request asks to close, or one is malformed. The fuzz targets `shop_server_*` include this
/// file and run it in-process.
pub fn serve_connection(mut reader: impl BufRead, mut writer: impl Write) {
    let mut connection = Connection::default();
    loop {
        match read_request(&mut reader) {
            Ok(None) => return,
            Ok(Some(request)) => {
                let (status, body) = connection.handle(&request);
                if write_response(&mut writer, status, &body, request.close).is_err() || request.close {
                    return;
                }
            }
            Err(problem) => {
                let _ = write_response(&mut writer, 400, &format!("{{\"error\":\"{problem}\"}}"), true);
                return;
            }
        }
    }
}

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let port = match args.iter().position(|a| a == "--port").and_then(|i| args.get(i + 1)) {
        Some(p) => p.parse::<u16>().unwrap_or_else(|_| {
            eprintln!("shop_server: bad port `{p}`");
            std::process::exit(2)
        }),
        None => 7400,
    };
    let listener = TcpListener::bind(("127.0.0.1", port)).unwrap_or_else(|e| {
        eprintln!("shop_server: cannot listen on 127.0.0.1:{port}: {e}");
        std::process::exit(2)
    });
    for stream in listener.incoming() {
        match stream {
            Ok(s) => serve(s),
            Err(e) => eprintln!("shop_server: accept: {e}"),
        }
    }
}
