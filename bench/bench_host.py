"""Host tool figures: sync throughput and wire overhead through the pseudo-terminal, archive
size per 10,000 contacts, export and plot times, demo wall time.

``python -m bench host``.  Figures and ratios only, no asserts.
"""
import contextlib
import io
import os
import shutil
import tempfile
import time

LINE_BAUD = 115200
BITS_PER_BYTE = 10          # 8N1: start + 8 data + stop (common practice)
RECORD_BYTES = 33           # device/log.py: one packed log record


class CountingPort(object):
    """Wrap a pyserial port and count the bytes each way."""

    def __init__(self, inner):
        self.inner = inner
        self.sent = 0
        self.received = 0

    def __getattr__(self, name):
        return getattr(self.inner, name)

    def write(self, data):
        self.sent += len(data)
        return self.inner.write(data)

    def read(self, n=1):
        data = self.inner.read(n)
        self.received += len(data)
        return data


def sync_figures(n, faults, tmp, batch=None):
    import serial
    from device.sim import VirtualTimer
    from engine import timescale
    from host import archive, sync
    from host.timer_client import TimerClient
    t0 = timescale.parse_utc("2031-05-14T07:00:00Z")
    vt = VirtualTimer(contacts=[(t0 + k * 2000000, "sun", "lower") for k in range(n)], link_faults=faults, seed=5)
    vt.run_contacts()
    port = vt.start()
    db = os.path.join(tmp, "sync-%d-%g-%s.sqlite3" % (n, faults, batch))
    try:
        ser = CountingPort(serial.Serial(port, LINE_BAUD, timeout=0.05, exclusive=True))
        client = TimerClient(ser, timeout=0.1)
        conn = archive.connect(db)
        t = time.perf_counter()
        res = sync.sync(client, conn, progress=False, batch=batch)
        dt = time.perf_counter() - t
        conn.close()
        ser.inner.close()
    finally:
        vt.stop()
    wire = ser.sent + ser.received
    line_bytes_per_s = LINE_BAUD / float(BITS_PER_BYTE)
    return {"records": res["new"], "seconds": dt, "per_s": res["new"] / dt, "wire_bytes": wire,
            "payload_bytes": res["new"] * RECORD_BYTES, "overhead": wire / float(res["new"] * RECORD_BYTES),
            "line_per_s": line_bytes_per_s / (wire / float(res["new"])), "requests": client.requests,
            "retried": client.retried, "line_s": wire / line_bytes_per_s}


def archive_size(tmp, n=10000):
    from host import archive
    db = os.path.join(tmp, "size.sqlite3")
    conn = archive.connect(db)
    t0 = 1926000000 * 1000000
    recs = [{"seq": k, "kind": "contact", "utc_us": t0 + k * 7300000, "body": "sun" if k % 5 else "moon",
             "limb": "lower" if k % 3 else "upper", "session": 1 + k // 40, "quality": "locked",
             "uncertainty_us": 20 + k % 50} for k in range(1, n + 1)]
    t = time.perf_counter()
    with archive.transaction(conn):
        archive.ensure_device(conn, "LC-BENCH")
    for k in range(0, n, 30):                   # batches as the timer sends them (30 records a frame)
        with archive.transaction(conn):
            archive.store_records(conn, "LC-BENCH", recs[k:k + 30])
    dt_store = time.perf_counter() - t
    conn.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    size = os.path.getsize(db)
    t = time.perf_counter()
    sessions = archive.refresh_sessions(conn)
    dt_sessions = time.perf_counter() - t
    from host import exports
    t = time.perf_counter()
    text = exports.contacts_csv(archive.contacts(conn))
    dt_csv = time.perf_counter() - t
    conn.close()
    return size, dt_store, len(sessions), dt_sessions, len(text), dt_csv


def run():
    tmp = tempfile.mkdtemp(prefix="limbclock-bench-")
    try:
        print("sync through the virtual timer's pseudo-terminal (%d baud line for comparison, 8N1)" % LINE_BAUD)
        print("%-28s %8s %8s %10s %10s %9s %12s %8s" % ("case", "records", "time s", "records/s", "wire bytes",
                                                       "overhead", "115200 bd r/s", "retries"))
        for label, n, faults, batch in (("clean link", 1500, 0.0, None), ("clean, 4 records/request", 1500, 0.0, 4),
                                        ("0.1 % bytes damaged", 600, 0.001, None)):
            f = sync_figures(n, faults, tmp, batch)
            print("%-28s %8d %8.2f %10.0f %10d %8.2fx %12.0f %8d" % (
                label, f["records"], f["seconds"], f["per_s"], f["wire_bytes"], f["overhead"], f["line_per_s"],
                f["retried"]))
            print("%-28s the same bytes take %.2f s on a real %d-baud line: the pty run took %.2fx that"
                  % ("", f["line_s"], LINE_BAUD, f["seconds"] / f["line_s"]))
        size, dt_store, nsess, dt_sess, csv_len, dt_csv = archive_size(tmp)
        print()
        print("archive (SQLite, WAL, synchronous=FULL), 10,000 contacts stored in batches of 30:")
        print("  file size %.0f KiB = %.1f bytes per contact (the timer's packed record: %d bytes, ratio %.1f)"
              % (size / 1024.0, size / 10000.0, RECORD_BYTES, size / 10000.0 / RECORD_BYTES))
        print("  store %.2f s (%.0f contacts/s, one fsync'd transaction per batch)" % (dt_store, 10000 / dt_store))
        print("  group into %d sessions %.2f s; CSV export %.0f KiB in %.2f s" % (nsess, dt_sess, csv_len / 1024.0,
                                                                                 dt_csv))
        print()
        from host import demo
        out = os.path.join(tmp, "demo")
        t = time.perf_counter()
        with contextlib.redirect_stdout(io.StringIO()):
            s = demo.run(out)
        dt = time.perf_counter() - t
        print("demo: wall time %.1f s (target: well under 60 s); %d contacts, fix %.2f nmi from the scenario's "
              "truth (DR %.2f nmi), %s the 95%% ellipse" % (dt, s["contacts"], s["error_nm"], s["dr_error_nm"],
                                                           "inside" if s["inside_ellipse"] else "outside"))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
