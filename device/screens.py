"""What the timer's 128 x 64 screen shows, laid out from the firmware's six display lines.

The firmware core writes six short text lines (``device/PROTOCOL.md``, "What the timer
shows"): clock state, UTC, ``S<session> <body> <limb> #<seq>``, the last message, then the
next contact and its countdown, or the on-board fix and its ellipse.  ``layout(lines)``
turns them into drawing items for the 8 x 8 font of ``framebuf`` (16 columns x 8 rows, or
bigger digits drawn 2 or 3 times the size): one of three screens,

* ``countdown`` - the clock state, UTC and the bearing to face (Zn), the next contact (image,
  body, limb, rise/set) and a large ``mm:ss`` (or ``3h05``) countdown in 24-pixel digits;
* ``fix``       - the on-board fix (latitude, longitude), its 95 % ellipse and its counts;
* ``text``      - everything else (no time yet, no plan and why, the fix failed and why,
  the reduction running), the lines themselves wrapped to 16 columns.

A held press turns the bottom row into an inverted ``release: <gesture>`` bar.  Lines of an
unexpected shape still show (as text), never raise.  ``draw(fb, lines)`` paints a
``framebuf.FrameBuffer`` (``device.display.Oled``) and returns the screen's name.

Items are ``(kind, x, y, text, scale)``: kind ``"t"`` text, ``"i"`` inverted text on a lit
bar, ``"b"`` big text (``scale`` 2 or 3).  ``fits(items)`` checks that each lies inside the
screen (a test runs every line the firmware produces through it).
"""
W = 128
H = 64
COLS = 16                      # 8-pixel font

_tmp = None                    # an 8 x 8 frame buffer for one big character (allocated once)


def _short_clock(l0):
    """``LOCKED +-31us`` as is; ``NO TIME - wait GPS`` -> ``NO TIME wait GPS``; at most 16 columns."""
    if len(l0) > COLS:
        l0 = l0.replace(" - ", " ")
    return l0[:COLS]


def _mode(l2):
    """``S1 SUN LL #5`` -> ``SUN LL`` (the selected body and limb)."""
    w = l2.split()
    return " ".join(w[1:3]) if len(w) >= 3 else l2[:7]


def _wrap(text, width=COLS):
    out = []
    line = ""
    for word in text.split():
        while len(word) > width:
            if line:
                out.append(line)
                line = ""
            out.append(word[:width])
            word = word[width:]
        if not line:
            line = word
        elif len(line) + 1 + len(word) <= width:
            line += " " + word
        else:
            out.append(line)
            line = word
    if line:
        out.append(line)
    return out


def _bottom(lines, items):
    msg = lines[3] if len(lines) > 3 else ""
    if msg.startswith("release:"):
        items.append(("i", 0, 56, msg[:COLS], 1))
    else:
        items.append(("t", 0, 56, msg[:COLS], 1))


def layout(lines):
    """(screen name, items) for the firmware's display lines (see the module docstring)."""
    lines = list(lines) + [""] * (6 - len(lines))
    l0, l1, l2, l3, l4, l5 = lines[:6]
    items = [("i", 0, 0, _short_clock(l0), 1)]
    time = l1[:8]
    nxt = l4.split()
    cnt = l5.split()
    if len(nxt) >= 5 and nxt[0] == "NEXT" and len(cnt) >= 4 and cnt[0] == "in" and cnt[2] == "Zn":
        # NEXT i03 SUN LL rise / in 12:34 Zn 076
        items.append(("t", 0, 10, ("%s Zn%s\xb0" % (time, cnt[3][:3]))[:COLS], 1))
        items.append(("t", 0, 20, " ".join(nxt[1:5])[:COLS], 1))
        count = cnt[1][:5]
        items.append(("b", (W - 24 * len(count)) // 2, 30, count, 3))
        _bottom(lines, items)
        return "countdown", items
    if l5.startswith("95%") and ("N " in l4 or "S " in l4):
        # 44°58.0'N 006°25.1'W / 95% 3.8x2.3nm 154 ; the message says FIX <used> used <rej> rej
        words = l3.split()
        head = "FIX"
        if len(words) >= 4 and words[0] == "FIX":
            head = "FIX %s used %s rej" % (words[1], words[3])
            if len(head) > COLS:
                head = "FIX %s used %srej" % (words[1], words[3])
        items[0] = ("i", 0, 0, head[:COLS], 1)
        pos = l4.split()
        if len(pos) == 2:
            items.append(("t", 0, 13, ("Lat " + " " * (10 - len(pos[0])) + pos[0])[:COLS], 1))
            items.append(("t", 0, 24, ("Lon " + " " * (10 - len(pos[1])) + pos[1])[:COLS], 1))
        else:
            items.append(("t", 0, 13, l4[:COLS], 1))
        ell = l5.split()
        doubt = words[6] if len(words) >= 7 and words[5] == "DOUBT" else None
        if len(ell) >= 3:
            items.append(("t", 0, 37, ("95% " + ell[1])[:COLS], 1))
            if doubt is None:
                items.append(("t", 0, 46, ("axis " + ell[2] + "\xb0")[:COLS], 1))
        else:
            items.append(("t", 0, 37, l5[:COLS], 1))
        if doubt is not None:               # a doubtful fix: its first doubt, inverted, instead of the axis
            items.append(("i", 0, 46, ("DOUBT " + doubt)[:COLS], 1))
        items.append(("t", 0, 56, ("%s %s" % (time, _short_clock(l0).split()[0]))[:COLS], 1))
        return "fix", items
    items.append(("t", 0, 10, ("%s %s" % (time, _mode(l2)))[:COLS], 1))
    y = 21
    for text in (l4, l5):
        for row in _wrap(text):
            if y > 46:
                break
            items.append(("t", 0, y, row, 1))
            y += 9
    _bottom(lines, items)
    return "text", items


def fits(items):
    """True when every item lies inside the 128 x 64 screen."""
    for kind, x, y, text, scale in items:
        s = scale if kind == "b" else 1
        if x < 0 or y < 0 or x + 8 * s * len(text) > W or y + 8 * s > H:
            return False
    return True


def _text(fb, text, x, y, c):
    """Text in the 8 x 8 font, with a degree sign (not in the font) drawn as a small ring."""
    i = text.find("\xb0")
    while i >= 0:
        fb.text(text[:i], x, y, c)
        cx = x + 8 * i
        fb.rect(cx + 2, y, 4, 4, c)
        text = text[i + 1:]
        x = cx + 8
        i = text.find("\xb0")
    fb.text(text, x, y, c)


def _big(fb, text, x, y, scale):
    global _tmp
    if _tmp is None:
        import framebuf
        _tmp = (bytearray(8), None)
        _tmp = (_tmp[0], framebuf.FrameBuffer(_tmp[0], 8, 8, framebuf.MONO_VLSB))
    buf, small = _tmp
    for ch in text:
        small.fill(0)
        small.text(ch, 0, 0, 1)
        for col in range(8):
            bits = buf[col]
            row = 0
            while bits:
                if bits & 1:
                    fb.fill_rect(x + col * scale, y + row * scale, scale, scale, 1)
                bits >>= 1
                row += 1
        x += 8 * scale


def draw(fb, lines):
    """Paint the screen for ``lines`` into ``fb`` (cleared first); returns the screen's name."""
    name, items = layout(lines)
    fb.fill(0)
    for kind, x, y, text, scale in items:
        if kind == "i":
            fb.fill_rect(0, y, W, 9 if y + 9 <= H else H - y, 1)
            _text(fb, text, x + 1 if len(text) < COLS else x, y + 1 if y + 9 <= H else y, 0)
        elif kind == "b":
            _big(fb, text, x, y, scale)
        else:
            _text(fb, text, x, y, 1)
    return name
