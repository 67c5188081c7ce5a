#!/usr/bin/env python3
# The training sessions of a bundled corpus as a client sends them: one file per session,
# replies removed (HTTP responses for shop-api; reply lines of the lamp-control pattern).
# Used by the fuzzing benches as arm b, the honest baseline.
#   benches/training_requests.py OUT_DIR SESSIONS_DIR CORPUS
import os, re, sys
out, src, corpus = sys.argv[1], sys.argv[2], sys.argv[3]
def http_requests(data):
    pos = 0
    while pos < len(data):
        end = data.find(b"\r\n\r\n", pos)
        if end < 0:
            return
        head = data[pos:end + 4]
        body_start = end + 4
        m = re.search(rb"(?im)^content-length:\s*(\d+)", head)
        if re.search(rb"(?im)^transfer-encoding:\s*chunked", head):
            p = body_start
            while True:
                line_end = data.index(b"\r\n", p)
                size = int(data[p:line_end].split(b";")[0], 16)
                p = line_end + 2 + size + 2
                if size == 0:
                    break
            body_end = p
        else:
            body_end = body_start + (int(m.group(1)) if m else 0)
        if not head.startswith(b"HTTP/"):
            yield data[pos:body_end]
        pos = body_end
reply = re.compile(rb"^(OK|ERR|VAL|EVT)( |$)")  # the reply_pattern of corpora/lamp-control
for name in sorted(os.listdir(src)):
    data = open(os.path.join(src, name), "rb").read()
    if corpus == "shop-api":
        requests = b"".join(http_requests(data))
    else:
        requests = b"".join(l for l in data.splitlines(keepends=True) if not reply.match(l))
    open(os.path.join(out, name), "wb").write(requests)
