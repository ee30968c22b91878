#!/usr/bin/python3
"""A hostile HTTP/1.1 target on loopback for squall's tests: it answers every request in one
chosen bad way, logs every request line and header it received (repr, one per line) to a file,
and exits by itself after --life seconds.

Usage: hostile.py MODE PORT LOGFILE [--life SECONDS] [--host 127.0.0.1]

Modes (what every answer is):
  garbage          random bytes, then close
  bad-status       "HTTP/1.1 2x0 OK" with a body
  two-lengths      two different Content-Length headers (RFC 9110, 8.6: invalid)
  endless-headers  "HTTP/1.1 200 OK" then header lines forever
  endless-chunked  a 200 with Transfer-Encoding: chunked, chunks forever
  huge             a 200 with Content-Length: 1 GiB, sent as fast as the client reads
  silent           accepts, reads, never answers
  list-inject      a list page whose items' paths carry CR LF, spaces and "@host" (target-
                   controlled text a {{pick}} would put in a request); every other request: 204
  ok               a small 200 JSON answer (the control)
"""
import os
import socket
import sys
import threading
import time

CHUNK = b"x" * 65536


def read_head(conn):
    """Reads one request head (and a Content-Length body); returns the head's lines or None."""
    data = b""
    while b"\r\n\r\n" not in data:
        part = conn.recv(65536)
        if not part:
            return None
        data += part
        if len(data) > 1 << 20:
            return None
    head, _, rest = data.partition(b"\r\n\r\n")
    lines = head.split(b"\r\n")
    for ln in lines[1:]:
        if ln.lower().startswith(b"content-length:"):
            need = int(ln.split(b":", 1)[1]) - len(rest)
            while need > 0:
                part = conn.recv(min(need, 65536))
                if not part:
                    break
                need -= len(part)
    return lines


def answer(mode, conn, lines):
    target = lines[0].split(b" ")[1] if len(lines[0].split(b" ")) > 1 else b"/"
    if mode == "garbage":
        conn.sendall(os.urandom(4096))
        return False
    if mode == "bad-status":
        conn.sendall(b"HTTP/1.1 2x0 OK\r\nContent-Length: 2\r\n\r\n{}")
        return True
    if mode == "two-lengths":
        conn.sendall(b"HTTP/1.1 200 OK\r\nContent-Length: 2\r\nContent-Length: 40\r\n\r\n{}")
        return True
    if mode == "endless-headers":
        conn.sendall(b"HTTP/1.1 200 OK\r\n")
        while True:
            conn.sendall(b"X-Gateway-Site: north-harbor-" + b"n" * 60 + b"\r\n")
    if mode == "endless-chunked":
        conn.sendall(b"HTTP/1.1 200 OK\r\nContent-Type: application/json\r\n"
                     b"Transfer-Encoding: chunked\r\n\r\n")
        while True:
            conn.sendall(b"10000\r\n" + CHUNK + b"\r\n")
    if mode == "huge":
        conn.sendall(b"HTTP/1.1 200 OK\r\nContent-Type: application/json\r\n"
                     b"Content-Length: 1073741824\r\n\r\n")
        for _ in range(1073741824 // len(CHUNK)):
            conn.sendall(CHUNK)
        return True
    if mode == "silent":
        while conn.recv(65536):
            pass
        return False
    if mode == "list-inject" and b"/v1/sites" in target and b"/gateways" in target \
            and target.count(b"/") == 4:
        body = (b'{"items": ['
                b'{"path": "/v1/sites/north/gateways/gw-1\\r\\nX-Injected: yes", "version": 1},'
                b'{"path": "/v1/sites/north/gateways/gw-2 HTTP/1.1\\r\\nHost: elsewhere", '
                b'"version": 2},'
                b'{"path": "@127.0.0.2:9/x", "version": 3},'
                b'{"path": "/v1/sites/north/gateways/gw-ok", "version": 5}]}')
        conn.sendall(b"HTTP/1.1 200 OK\r\nContent-Type: application/json\r\nContent-Length: "
                     + str(len(body)).encode() + b"\r\n\r\n" + body)
        return True
    if mode == "list-inject":
        conn.sendall(b"HTTP/1.1 204 No Content\r\n\r\n")
        return True
    conn.sendall(b"HTTP/1.1 200 OK\r\nContent-Type: application/json\r\nContent-Length: 2\r\n\r\n{}")
    return True


def serve_one(mode, conn, log, lock):
    try:
        conn.settimeout(60)
        while True:
            lines = read_head(conn)
            if lines is None:
                return
            with lock:
                for ln in lines:
                    log.write(repr(ln) + "\n")
                log.write("--\n")
                log.flush()
            if not answer(mode, conn, lines):
                return
    except OSError:
        pass
    finally:
        conn.close()


def main():
    mode, port, logpath = sys.argv[1], int(sys.argv[2]), sys.argv[3]
    life = float(sys.argv[sys.argv.index("--life") + 1]) if "--life" in sys.argv else 60
    host = sys.argv[sys.argv.index("--host") + 1] if "--host" in sys.argv else "127.0.0.1"
    srv = socket.socket()
    srv.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    srv.bind((host, port))
    srv.listen(256)
    srv.settimeout(0.2)
    log = open(logpath, "w")
    lock = threading.Lock()
    end = time.monotonic() + life
    while time.monotonic() < end:
        try:
            conn, _ = srv.accept()
        except socket.timeout:
            continue
        threading.Thread(target=serve_one, args=(mode, conn, log, lock), daemon=True).start()
    os._exit(0)


if __name__ == "__main__":
    main()
