"""Host tool figures: sync throughput and wire overhead through the pseudo-terminal, sync
completion and time on links damaging 0.2 %, 1 %, 2 % and 5 % of the bytes, archive size per
10,000 contacts, export and plot times, demo wall time.

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


NOISY_RATES = (0.002, 0.01, 0.02, 0.05)
NOISY_RECORDS = 300
NOISY_SEEDS = 6


def noisy_sync(rate, seed, n, tmp):
    """One sync of ``n`` records over the virtual timer's pty, the link damaging ``rate`` of the bytes
    each way (half dropped, half changed; seeded): (completed exactly, wall s, wire bytes, client figures,
    message if it failed)."""
    import serial
    from device.sim import VirtualTimer
    from engine import timescale
    from host import archive, sync
    from host.timer_client import TimerClient, TimerError
    t0 = timescale.parse_utc("2031-05-14T07:00:00Z")
    vt = VirtualTimer(contacts=[(t0 + k * 2000000, "sun", "lower") for k in range(n)], link_faults=rate, seed=seed)
    vt.run_contacts()
    truth = [r.pack() for r in vt.fw.log.records()]
    port = vt.start()
    db = os.path.join(tmp, "noisy-%g-%d.sqlite3" % (rate, seed))
    ser = None
    try:
        ser = CountingPort(serial.Serial(port, LINE_BAUD, timeout=0.01, exclusive=True))
        client = TimerClient(ser, timeout=1.0)
        conn = archive.connect(db)
        t = time.perf_counter()
        try:
            sync.sync(client, conn, progress=False)
            err = None
        except (TimerError, ValueError) as exc:
            err = str(exc)
        dt = time.perf_counter() - t
        held = [bytes(r[0]) for r in conn.execute("SELECT raw FROM log_records ORDER BY seq")]
        conn.close()
    finally:
        if ser is not None:
            ser.inner.close()
        vt.stop()
    exact = err is None and held == truth and vt.fw.log.confirmed_seq == len(truth)
    return exact, dt, ser.sent + ser.received, client.link_figures(), err


def noisy_table(tmp, rates=NOISY_RATES, seeds=NOISY_SEEDS, n=NOISY_RECORDS):
    print("sync of %d records on a noisy link (virtual timer's pty, damage both ways, %d seeded runs per rate)"
          % (n, seeds))
    print("%-9s %8s %10s %10s %12s %14s %10s %9s %8s" % ("damaged", "exact", "median s", "max s", "wire bytes",
                                                         "115200 bd s", "rounds", "est. dmg", "part B"))
    for rate in rates:
        runs = [noisy_sync(rate, seed, n, tmp) for seed in range(1, seeds + 1)]
        ok = [r for r in runs if r[0]]
        times = sorted(r[1] for r in runs)
        wire = sorted(r[2] for r in runs)[len(runs) // 2]
        figs = [r[3] for r in runs]
        rounds = sorted(f["requests"] + f["rounds_retried"] for f in figs)[len(figs) // 2]
        est = sorted(f["error_rate"] for f in figs)[len(figs) // 2]
        part = sorted(f["part_len"] for f in figs)[len(figs) // 2]
        print("%-9s %5d/%-2d %10.2f %10.2f %12d %14.2f %10d %8.2f%% %8d" % (
            "%.1f %%" % (100 * rate), len(ok), len(runs), times[len(times) // 2], times[-1], wire,
            wire * BITS_PER_BYTE / float(LINE_BAUD), rounds, 100 * est, part))
        for r in runs:
            if not r[0]:
                print("          failed: %s" % (r[4] or "records differ"))
    print("(exact: every record once, byte for byte, and the timer confirmed all of them; median and max wall time "
          "over the pty; 115200 bd s: the median wire bytes on a real 8N1 line; rounds: requests + retried rounds; "
          "est. dmg and part B: the client's error estimate and part size at the end)")


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
        print()
        noisy_table(tmp)
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
