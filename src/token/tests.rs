use super::*;

fn pieces(format: Format, message: &[u8]) -> Vec<String> {
    let t = Tokenizer::new(format, &RuleSet::builtin(), "builtin").unwrap();
    let mut out = Tokenized::default();
    t.tokenize(message, &mut out);
    out.pieces
        .iter()
        .map(|p| match p.kind {
            PieceKind::Lit => crate::escape::escape(out.bytes(p)),
            PieceKind::Slot(c) => {
                format!("{{{}={}}}", t.classes()[c as usize], crate::escape::escape(out.bytes(p)))
            }
            PieceKind::Derived(_) => format!("{{=len {}}}", crate::escape::escape(out.bytes(p))),
            PieceKind::Body(f) => format!("{{body {f:?}}}"),
        })
        .collect()
}

fn joined(format: Format, message: &[u8]) -> String {
    pieces(format, message).join("|")
}

#[test]
fn lines_get_typed_slots() {
    assert_eq!(
        joined(Format::Lines, b"SET zone=4 level=70\n"),
        "SET| |zone|=|{int=4}| |level|=|{int=70}|\\n"
    );
    assert_eq!(
        joined(
            Format::Lines,
            b"from 192.0.2.7 at 2026-11-30T08:15:02.123Z id=3f2a1b4c-0d9e-4f11-8a2b-1c2d3e4f5a6b\r\n"
        ),
        "from| |{ipv4=192.0.2.7}| |at| |{timestamp=2026-11-30T08:15:02.123Z}| |id|=|{uuid=3f2a1b4c-0d9e-4f11-8a2b-1c2d3e4f5a6b}|\\r\\n"
    );
    assert_eq!(
        joined(Format::Lines, b"MAIL FROM:<ana@example.org> SIZE=2048"),
        "MAIL| |FROM|:|<|{email=ana@example.org}|>| |SIZE|=|{int=2048}"
    );
    assert_eq!(
        joined(Format::Lines, br#"SCENE SAVE name="Dusk \"low\"" v2 1.5 ::1 fe80::1ff:fe23:4567:890a"#),
        r#"SCENE| |SAVE| |name|=|"|{string=Dusk \\"low\\"}|"| |v2| |{decimal=1.5}| |{ipv6=::1}| |{ipv6=fe80::1ff:fe23:4567:890a}"#
    );
}

#[test]
fn hex_and_base64_need_their_shape() {
    assert_eq!(joined(Format::Lines, b"AUTH 9f3a2b1c0d9e4f11"), "AUTH| |{hex=9f3a2b1c0d9e4f11}");
    assert_eq!(joined(Format::Lines, b"t 12345678"), "t| |{int=12345678}");
    assert_eq!(joined(Format::Lines, b"k dGhpcyBpcyBhIHRlc3Q="), "k| |{base64=dGhpcyBpcyBhIHRlc3Q=}");
    // 16 letters without a digit or symbol is a word, not base64.
    assert_eq!(joined(Format::Lines, b"abcdefghijklmnop"), "abcdefghijklmnop");
}

#[test]
fn quoted_values_are_refined() {
    assert_eq!(
        joined(Format::Lines, br#"at="2026-11-30T08:15:02Z""#),
        r#"at|=|"|{timestamp=2026-11-30T08:15:02Z}|""#
    );
}

#[test]
fn json_is_tokenized_structurally() {
    assert_eq!(
        joined(
            Format::Jsonl,
            br#"{"visit":"3f2a1b4c-0d9e-4f11-8a2b-1c2d3e4f5a6b","n":-3,"x":1.5e3,"ok":true,"s":"hi","e":""}"#
        ),
        r#"{|"visit"|:|"|{uuid=3f2a1b4c-0d9e-4f11-8a2b-1c2d3e4f5a6b}|"|,|"n"|:|{int=-3}|,|"x"|:|{decimal=1.5e3}|,|"ok"|:|true|,|"s"|:|"|{string=hi}|"|,|"e"|:|"|{string=}|"|}"#
    );
}

#[test]
fn json_survives_garbage_and_deep_nesting() {
    let deep = "[".repeat(100_000);
    assert_eq!(pieces(Format::Jsonl, deep.as_bytes()).len(), 100_000);
    assert_eq!(joined(Format::Jsonl, b"\"open"), "\"open");
}

#[test]
fn http_request_head_and_json_body() {
    let msg = b"POST /v1/carts/88/items?x=1 HTTP/1.1\r\nHost: api.crumb.example\r\nContent-Type: application/json\r\nContent-Length: 12\r\n\r\n{\"qty\":3}   ";
    assert_eq!(
        joined(Format::Http, msg),
        "POST |/|v1|/|carts|/|{int=88}|/|items|?|x|=|{int=1}| HTTP/1.1|\\r\\n|Host: |{host=api.crumb.example}|\\r\\n|Content-Type: |application|/|json|\\r\\n|Content-Length: |{=len 12}|\\r\\n|\\r\\n|{body Length}|{|\"qty\"|:|{int=3}|}|   "
    );
}

#[test]
fn http_chunked_body_is_dechunked_and_responses_keep_status() {
    let msg = b"PUT /a HTTP/1.1\r\nTransfer-Encoding: chunked\r\n\r\n3\r\nab1\r\n0\r\n\r\n";
    let p = pieces(Format::Http, msg);
    assert_eq!(p[p.len() - 2..].join("|"), "{body Chunked}|ab1");
    let p = pieces(Format::Http, b"HTTP/1.1 404 Not Found\r\nContent-Length: 0\r\n\r\n");
    assert_eq!(p[0], "HTTP/1.1 404 Not Found");
}

#[test]
fn unparseable_http_falls_back_to_text() {
    assert_eq!(joined(Format::Http, b"\x00GET"), "\\x00|GET");
}

#[test]
fn lines_tokenize_losslessly() {
    let t = Tokenizer::new(Format::Lines, &RuleSet::builtin(), "builtin").unwrap();
    let mut out = Tokenized::default();
    let samples: [&[u8]; 4] = [b"a\xff\xfe b \x00\r\n", "Grüße 12.5.6 ::".as_bytes(), b"", b"\"unterminated"];
    for s in samples {
        t.tokenize(s, &mut out);
        let back: Vec<u8> = out.pieces.iter().flat_map(|p| out.bytes(p).to_vec()).collect();
        assert_eq!(back, s);
    }
}
