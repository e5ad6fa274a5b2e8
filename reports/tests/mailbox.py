"""Mail for the digest tests: reading the file backend's messages, a tiny
SMTP server that turns the first connections away, and a file backend that
stalls inside its first send (to kill a worker mid-send)."""

import email
import email.policy
import socketserver
import threading
import time
from pathlib import Path

from django.core.mail.backends.filebased import EmailBackend as FileBackend

SEPARATOR = "-" * 79


def read_mail_folder(folder):
    """Every message the file backend wrote under ``folder``, parsed (as bytes:
    the text parts travel as 8-bit UTF-8)."""
    out = []
    for path in sorted(Path(folder).glob("*.log")):
        for chunk in path.read_bytes().split(b"\n" + SEPARATOR.encode() + b"\n"):
            if chunk.strip():
                out.append(email.message_from_bytes(chunk.lstrip(b"\n"), policy=email.policy.default))
    return out


def parts(msg):
    """{content type: payload (str or bytes)} of a message's leaves."""
    found = {}
    for part in msg.walk():
        if part.is_multipart():
            continue
        found.setdefault(part.get_content_type(), part.get_content())
    return found


class _Session(socketserver.StreamRequestHandler):
    def handle(self):
        server = self.server
        with server.lock:
            server.connections += 1
            refuse = server.connections <= server.refuse_first
        if refuse:
            self.wfile.write(b"421 smtp.test busy, try again later\r\n")
            return
        self.wfile.write(b"220 smtp.test ready\r\n")
        in_data, lines = False, []
        while True:
            line = self.rfile.readline()
            if not line:
                return
            if in_data:
                if line in (b".\r\n", b".\n"):
                    in_data = False
                    with server.lock:
                        server.messages.append(b"".join(lines).decode("utf-8", "replace"))
                    lines = []
                    self.wfile.write(b"250 queued\r\n")
                else:
                    lines.append(line[1:] if line.startswith(b"..") else line)
                continue
            verb = line[:4].upper()
            if verb in (b"EHLO", b"HELO"):
                self.wfile.write(b"250 smtp.test\r\n")
            elif verb == b"DATA":
                in_data = True
                self.wfile.write(b"354 go ahead\r\n")
            elif verb == b"QUIT":
                self.wfile.write(b"221 bye\r\n")
                return
            else:  # MAIL, RCPT, RSET, NOOP
                self.wfile.write(b"250 ok\r\n")


class SmtpServer(socketserver.ThreadingTCPServer):
    """An SMTP server on 127.0.0.1 that answers 421 to its first
    ``refuse_first`` connections and keeps the messages it takes."""

    daemon_threads = True
    allow_reuse_address = True

    def __init__(self, refuse_first=0):
        super().__init__(("127.0.0.1", 0), _Session)
        self.refuse_first, self.connections, self.messages = refuse_first, 0, []
        self.lock = threading.Lock()
        self.thread = threading.Thread(target=self.serve_forever, daemon=True)

    @property
    def port(self):
        return self.server_address[1]

    def __enter__(self):
        self.thread.start()
        return self

    def __exit__(self, *exc):
        self.shutdown()
        self.server_close()


class StallOnceFileBackend(FileBackend):
    """The file backend, except that the very first send of a test (no
    ``stalled`` marker beside the mail folder yet) leaves the marker and then
    hangs before writing anything, as a send cut off when its worker dies."""

    def send_messages(self, email_messages):
        marker = Path(self.file_path).parent / "stalled"
        if not marker.exists():
            marker.write_text("stalled in send\n")
            time.sleep(600)
        return super().send_messages(email_messages)
