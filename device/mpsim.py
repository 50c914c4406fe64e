"""The virtual timer with its firmware under MicroPython: the CPython side of the simulator shim.

``MicroPythonTimer`` is a ``device.sim.VirtualTimer`` (same world, same presses, same
pseudo-terminal and link faults) whose firmware is not the CPython one: it starts MicroPython's
unix port on a board tree built for the ``sim`` profile (``limbclock board build --profile
sim``) and drives it through the shim of ``device/simboard.py``: at every pass the CPython
virtual timer would run, it sends the pass's PPS and button edges and GPS bytes, then
``P <tick>``.  The host link is the MicroPython process's standard input and output; the
bytes go through the virtual timer's queues, so ``limbclock sync/push/export`` open the same
pseudo-terminal as against the CPython timer.  Power cuts are not simulated here.

Lines to the MicroPython side are batched (sent at the end of each ``advance_to`` or every
``BATCH`` bytes); a reader thread takes its answers.  ``settle()`` waits until it has run every
pass sent; ``summary()`` asks for its log, fix and next contact.
"""
import json
import os
import subprocess
import tempfile
import threading
import time

from device.sim import VirtualTimer, SimError
from device.simhw import SimHardware

BATCH = 32768


class _Remote:
    """Stands for ``Firmware`` in the simulated world: ``poll()`` forwards a pass to MicroPython."""

    def __init__(self, vt, proc, wfd, rfd):
        self.vt = vt
        self.proc = proc
        self.wfd = wfd
        self.out = []
        self.size = 0
        self.lock = threading.Lock()
        self.cond = threading.Condition(self.lock)
        self.host_out = bytearray()
        self.replies = {}
        self.next_y = 0
        self.lines = None
        self.buzzes = []
        self.stderr = []
        self.dead = False
        self._threads = [threading.Thread(target=self._read_answers, args=(rfd,), daemon=True),
                         threading.Thread(target=self._read_stdout, daemon=True),
                         threading.Thread(target=self._read_stderr, daemon=True)]
        for t in self._threads:
            t.start()

    # -- to MicroPython -------------------------------------------------------------------------
    def send(self, line):
        self.out.append(line)
        self.size += len(line) + 1
        if self.size >= BATCH:
            self.flush()

    def flush(self):
        if not self.out:
            return
        data = ("\n".join(self.out) + "\n").encode()
        self.out = []
        self.size = 0
        try:
            os.write(self.wfd, data) if len(data) < 4096 else _write_all(self.wfd, data)
        except (BrokenPipeError, OSError):
            self.dead = True
            raise SimError("the MicroPython timer stopped: %s" % self.error_text())

    def poll(self):
        vt = self.vt
        hw = vt.hw
        for t in hw.q_pps:
            self.send("S %d" % t)
        for t, v in hw.q_button:
            self.send("B %d %d" % (t, 1 if v else 0))
        if hw.gps_buf:
            self.send("G " + bytes(hw.gps_buf).hex())
        hw.q_pps, hw.q_button, hw.gps_buf = [], [], bytearray()
        if hw.host_in:
            self.flush()
            data = bytes(hw.host_in)
            hw.host_in = bytearray()
            try:
                _write_all(self.proc.host_fd, data)
            except (BrokenPipeError, OSError):
                self.dead = True
        self.send("P %d" % hw.ticks_us())
        with self.lock:
            if self.host_out:
                hw.host_out.extend(self.host_out)
                self.host_out = bytearray()

    def ask(self, kind, timeout=600):
        """Send ``Y n`` or ``R`` and wait for the answer (everything sent before it is done)."""
        with self.lock:
            self.next_y += 1
            key = "Y %d" % self.next_y if kind == "Y" else "R%d" % self.next_y
        self.send(key if kind == "Y" else "R")
        self.flush()
        deadline = time.monotonic() + timeout
        with self.cond:
            while (key if kind == "Y" else "R") not in self.replies:
                if self.dead or self.proc.poll() is not None:
                    raise SimError("the MicroPython timer stopped: %s" % self.error_text())
                left = deadline - time.monotonic()
                if left <= 0:
                    raise SimError("the MicroPython timer did not answer within %d s" % timeout)
                self.cond.wait(min(left, 0.5))
            return self.replies.pop(key if kind == "Y" else "R")

    # -- from MicroPython -------------------------------------------------------------------
    def _read_answers(self, rfd):
        with os.fdopen(rfd, "rb") as f:
            for raw in f:
                line = raw.decode("utf-8", "replace").rstrip("\n")
                kind, _, rest = line.partition(" ")
                if kind == "D":
                    self.lines = json.loads(rest)
                    self.vt.hw.display = self.lines
                    self.vt._on_display(self.vt.world.t_us, self.lines)
                elif kind == "Z":
                    self.buzzes.append(rest)
                elif kind == "Y":
                    with self.cond:
                        self.replies[line] = True
                        self.cond.notify_all()
                elif kind == "R":
                    with self.cond:
                        self.replies["R"] = json.loads(rest)
                        self.cond.notify_all()
        with self.cond:
            self.dead = True
            self.cond.notify_all()

    def _read_stdout(self):
        fd = self.proc.stdout.fileno()
        while True:
            try:
                data = os.read(fd, 4096)
            except OSError:
                break
            if not data:
                break
            with self.lock:
                self.host_out.extend(data)

    def _read_stderr(self):
        for raw in self.proc.stderr:
            self.stderr.append(raw.decode("utf-8", "replace").rstrip())
            del self.stderr[:-40]

    def error_text(self):
        return " | ".join(self.stderr[-3:]) or "exit %s" % self.proc.poll()


def _write_all(fd, data):
    mv = memoryview(data)
    while mv:
        n = os.write(fd, mv)
        mv = mv[n:]


class MicroPythonTimer(VirtualTimer):
    """``VirtualTimer(...)`` whose firmware runs in MicroPython's unix port.  ``tree`` is a board
    tree built for the ``sim`` profile; ``command`` the argv that starts the port with its heap
    (``host.mpunix.command``) before the script path."""

    def __init__(self, tree, command, screen=True, remove_tree=False, **kw):
        if kw.get("power_cut_at_us") is not None or kw.get("power_cut_after_bytes") is not None:
            raise SimError("power cuts are not simulated with --micropython")
        self.tree = tree
        self.remove_tree = remove_tree
        self.command = list(command)
        self.screen = screen
        self.remote = None
        self.final = None
        self._tmp = None
        if not kw.get("state_dir"):
            self._tmp = tempfile.mkdtemp(prefix="limbclock-mpsim-")
            kw["state_dir"] = self._tmp
        VirtualTimer.__init__(self, **kw)

    def _boot(self, budget=None):
        self.store = self.base_store
        self.hw = SimHardware(self.world, self.store, self.ticks_period, self.uid)
        w_r, w_w = os.pipe()            # world -> MicroPython
        a_r, a_w = os.pipe()            # answers <- MicroPython
        h_r, h_w = os.pipe()            # host link -> MicroPython's standard input
        # the unix port has no fcntl: the read ends it polls are made non-blocking here (the flag
        # belongs to the open file, which the child shares)
        os.set_blocking(w_r, False)
        os.set_blocking(h_r, False)
        env = dict(os.environ, MICROPYPATH=os.path.join(self.tree, "lib"), LIMBCLOCK_SHIM="%d,%d" % (w_r, a_w))
        try:
            proc = subprocess.Popen(self.command + [os.path.join(self.tree, "main.py")], cwd=self.tree, env=env,
                                    stdin=h_r, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                    pass_fds=(w_r, a_w), start_new_session=True)
            # its own session: a Ctrl-C at the terminal stops the virtual timer, which then ends the
            # MicroPython side itself (Q, or the end of the world pipe if this process dies)
        finally:
            for fd in (w_r, a_w, h_r):
                os.close(fd)
        proc.host_fd = h_w
        self.remote = _Remote(self, proc, w_w, a_r)
        self.fw = self.remote
        from device.firmware import device_id_from
        did = self.device_id or device_id_from(self.uid)     # as the CPython virtual timer's firmware
        self.remote.send("I " + json.dumps({"tick": self.hw.ticks_us(), "period": self.ticks_period,
                                            "device_id": did, "flash_dir": os.path.abspath(self.store.root),
                                            "screen": self.screen}))
        self.remote.flush()
        self.world.attach(self.hw, self.remote)

    def _power_off(self):
        raise SimError("power cuts are not simulated with --micropython")

    def advance_to(self, t_us):
        VirtualTimer.advance_to(self, t_us)
        r = self.remote
        r.flush()
        with r.lock:
            if r.host_out:
                self.hw.host_out.extend(r.host_out)
                r.host_out = bytearray()

    def settle(self, timeout=600):
        """Wait until MicroPython has run every pass sent so far."""
        self.remote.flush()
        self.remote.ask("Y", timeout)

    def run_contacts(self):
        VirtualTimer.run_contacts(self)
        self.settle()

    def summary(self, timeout=120):
        """{"device_id", "last_seq", "confirmed_seq", "onboard_fix", "next_contact", "polls", "display"}."""
        return self.remote.ask("R", timeout)

    def stop(self):
        VirtualTimer.stop(self)
        r = self.remote
        if r is None:
            return None
        final = None
        if r.proc.poll() is None and not r.dead:
            try:
                with self.lock:
                    final = self.summary(60)
                    r.send("Q")
                    r.flush()
            except SimError:
                pass
        try:
            os.close(r.wfd)
        except OSError:
            pass
        try:
            r.proc.wait(10)
        except subprocess.TimeoutExpired:
            r.proc.kill()
            r.proc.wait(5)
        for f in (r.proc.stdout, r.proc.stderr):
            try:
                f.close()
            except OSError:
                pass
        try:
            os.close(r.proc.host_fd)
        except OSError:
            pass
        self.remote = None
        self.final = final
        import shutil
        for d in (self._tmp, self.tree if self.remove_tree else None):
            if d:
                shutil.rmtree(d, ignore_errors=True)
        return final
