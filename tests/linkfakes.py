"""Stand-ins shared by the link and sync tests."""


class GappyLog(object):
    """The timer's log, except that it no longer holds the records ``lost`` (damaged on its
    flash and skipped): ``read_raw`` returns the records held from a seq on, gaps left out."""

    def __init__(self, log, lost):
        self.log = log
        self.lost = set(lost)

    def __getattr__(self, name):
        return getattr(self.log, name)

    def held(self, a, b):
        return [r.pack() for r in self.log.records(a) if r.seq <= b and r.seq not in self.lost]

    def read_raw(self, from_seq, n):
        return b"".join(self.held(from_seq, self.log.next_seq)[:n])
