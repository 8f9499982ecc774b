#!/usr/bin/python3
# check_report.py - independent check of one plyledger disposition report
# (a self-contained HTML file), in a real browser.
#
# A disposition report is handed over with the airframe and read years later,
# on whatever machine, offline, perhaps printed. So it must stand alone: one
# well-formed HTML file, every image embedded as a data:image/png;base64 URI,
# nothing fetched from anywhere, no script needed (none allowed), and a print
# stylesheet for A4. This checker does not trust the generator's code: it
# reads the file as a stranger would.
#
#   1. Structure (html5lib's strict WHATWG parser, Debian python3-html5lib):
#      no parse error; <!DOCTYPE html>; <html lang>; <meta charset=utf-8> in
#      the first 1024 bytes; one non-empty <title>; exactly one <h1>; every
#      <img> with alt text and a data:image/png;base64 src; no reference out
#      of the file (src/href/srcset/data/poster/... attributes, CSS url() and
#      @import, <base>, meta refresh) other than data: URIs and #fragments;
#      no <script>, no event-handler attributes, no javascript: URLs; a
#      <style> with an @media print block holding an @page rule of size A4.
#      Every embedded PNG is decoded twice: chunk by chunk with zlib+struct
#      (signature, CRCs, IHDR, IDAT stream, scanline filters, IEND) and in
#      full by skimage.io; its size is reported.
#   2. Browser (Debian chromium, headless, private profile under a temp
#      dir, no name resolution, a timeout so that a hung browser fails):
#      a 1240x1754 screenshot that must not be blank (share of non-white
#      pixels, number of distinct colours); a private copy of the report with
#      a probe script appended, dumped with --dump-dom, which proves how many
#      <img> the browser decoded (complete, naturalWidth > 0, and decode()
#      not rejected) and gives the rendered text (innerText) for --expect; the
#      report printed to PDF, which must be non-trivial, with A4 pages (the
#      print stylesheet's doing: chromium's default paper is Letter).
#   3. A short summary on stdout; exit 0 when all is well, else exit 1 with
#      one "FAULT: where: what" line per fault on stderr.
#
# Note: the browser accepts a truncated PNG or one with a bad CRC (it draws
# what it can and reports the image complete and decoded), so the structural
# PNG decode is the check that catches those; the browser check catches what
# the browser itself refuses (bad base64, not an image, not loadable).
#
# Usage: check_report.py REPORT.html --screenshot OUT.png [--min-images N]
#            [--expect TEXT ...] [--chromium PATH] [--pdf OUT.pdf]
#            [--timeout SECONDS] [--min-ink FRACTION] [--min-colours N]
# Run it with /usr/bin/python3 (Debian's: numpy, skimage, html5lib).
import argparse
import base64
import binascii
import hashlib
import io
import json
import os
import pathlib
import re
import shutil
import signal
import struct
import subprocess
import sys
import tempfile
import time
import zlib

VIEW_W, VIEW_H = 1240, 1754           # A4 at 150 dpi
A4_PT = (595.28, 841.89)              # A4 in PDF points
A4_TOL_PT = 2.0
MIN_PDF_BYTES = 10 * 1024
MAX_PNG_PIXELS = 64 * 1024 * 1024     # refuse absurd IHDR sizes before inflating
PROBE_ID = "report-check-probe"

faults = []


def fault(where, what):
    faults.append("%s: %s" % (where, what))


def short(s, n=60):
    s = " ".join(s.split())
    return s if len(s) <= n else s[:n] + "..."


# ---- PNG, by hand -------------------------------------------------------------

PNG_SIG = b"\x89PNG\r\n\x1a\n"
PNG_DEPTHS = {0: (1, (1, 2, 4, 8, 16)), 2: (3, (8, 16)), 3: (1, (1, 2, 4, 8)),
              4: (2, (8, 16)), 6: (4, (8, 16))}
PNG_KIND = {0: "grey", 2: "RGB", 3: "palette", 4: "grey+alpha", 6: "RGBA"}
ADAM7 = ((0, 0, 8, 8), (4, 0, 8, 8), (0, 4, 4, 8), (2, 0, 4, 4),
         (0, 2, 2, 4), (1, 0, 2, 2), (0, 1, 1, 2))


class PngError(Exception):
    pass


def png_check(data):
    """Decode a PNG's structure with zlib+struct; return (w, h, depth, kind)
    or raise PngError saying what is wrong."""
    if data[:8] != PNG_SIG:
        raise PngError("not a PNG (signature %s)" % data[:8].hex())
    pos, n, ihdr, idat, plte, seen_idat, ended = 8, 0, None, [], False, False, False
    last = None
    while pos < len(data):
        if pos + 12 > len(data):
            raise PngError("truncated chunk header at byte %d" % pos)
        length, ctype = struct.unpack(">I4s", data[pos:pos + 8])
        if length > 0x7FFFFFFF or pos + 12 + length > len(data):
            raise PngError("truncated %r chunk at byte %d (%d bytes declared, %d left)"
                           % (ctype.decode("latin-1"), pos, length, len(data) - pos - 12))
        body = data[pos + 8:pos + 8 + length]
        (crc,) = struct.unpack(">I", data[pos + 8 + length:pos + 12 + length])
        if zlib.crc32(ctype + body) & 0xFFFFFFFF != crc:
            raise PngError("bad CRC in %r chunk at byte %d" % (ctype.decode("latin-1"), pos))
        name = ctype.decode("latin-1")
        if n == 0 and ctype != b"IHDR":
            raise PngError("first chunk is %r, not IHDR" % name)
        if ctype == b"IHDR":
            if n != 0 or length != 13:
                raise PngError("bad IHDR chunk")
            ihdr = struct.unpack(">IIBBBBB", body)
        elif ctype == b"PLTE":
            plte = True
        elif ctype == b"IDAT":
            if seen_idat and last != b"IDAT":
                raise PngError("IDAT chunks not consecutive")
            seen_idat = True
            idat.append(body)
        elif ctype == b"IEND":
            ended = True
            pos += 12 + length
            break
        last = ctype
        n += 1
        pos += 12 + length
    if not ended:
        raise PngError("no IEND chunk (file truncated?)")
    if pos != len(data):
        raise PngError("%d bytes after IEND" % (len(data) - pos))
    w, h, depth, ctype, comp, filt, interlace = ihdr
    if w == 0 or h == 0 or w > 0x7FFFFFFF or h > 0x7FFFFFFF or w * h > MAX_PNG_PIXELS:
        raise PngError("bad size %dx%d" % (w, h))
    if ctype not in PNG_DEPTHS or depth not in PNG_DEPTHS[ctype][1]:
        raise PngError("bad colour type %d / bit depth %d" % (ctype, depth))
    if comp != 0 or filt != 0 or interlace not in (0, 1):
        raise PngError("bad compression/filter/interlace method")
    if ctype == 3 and not plte:
        raise PngError("palette image without PLTE")
    if not idat:
        raise PngError("no IDAT chunk")
    d = zlib.decompressobj()
    try:
        raw = d.decompress(b"".join(idat), MAX_PNG_PIXELS * 8 + 1)
    except zlib.error as e:
        raise PngError("image data does not inflate (%s)" % e)
    if not d.eof:
        raise PngError("image data stream is incomplete")
    bpp_bits = PNG_DEPTHS[ctype][0] * depth
    passes = ADAM7 if interlace else ((0, 0, 1, 1),)
    off = 0
    for x0, y0, dx, dy in passes:
        pw, ph = (w - x0 + dx - 1) // dx, (h - y0 + dy - 1) // dy
        if pw == 0 or ph == 0:
            continue
        stride = 1 + (pw * bpp_bits + 7) // 8
        rows = raw[off:off + stride * ph]
        if len(rows) < stride * ph:
            raise PngError("image data too short: %d bytes, %d expected"
                           % (len(raw), off + stride * ph))
        bad = [i for i in range(ph) if rows[i * stride] > 4]
        if bad:
            raise PngError("bad filter type %d on row %d" % (rows[bad[0] * stride], bad[0]))
        off += stride * ph
    if off != len(raw):
        raise PngError("image data too long: %d bytes, %d expected" % (len(raw), off))
    return w, h, depth, PNG_KIND[ctype]


def png_full_decode(data):
    """Decode all pixels with skimage.io (an independent decoder); return shape."""
    import skimage.io
    return skimage.io.imread(io.BytesIO(data)).shape


# ---- CSS ----------------------------------------------------------------------

def css_strip_comments(css):
    return re.sub(r"/\*.*?(\*/|$)", " ", css, flags=re.S)


def css_blocks(css):
    """Top-level (prelude, body) pairs of a stylesheet, braces matched,
    strings skipped."""
    out, i, start, depth, body0, n = [], 0, 0, 0, 0, len(css)
    while i < n:
        c = css[i]
        if c in "\"'":
            j = i + 1
            while j < n and css[j] != c:
                j += 2 if css[j] == "\\" else 1
            i = j + 1
            continue
        if c == "{":
            if depth == 0:
                prelude, body0 = css[start:i], i + 1
            depth += 1
        elif c == "}":
            depth -= 1
            if depth == 0:
                out.append((prelude.strip(), css[body0:i]))
                start = i + 1
            depth = max(depth, 0)
        elif c == ";" and depth == 0:
            start = i + 1          # a statement at-rule (@import, @charset)
        i += 1
    return out


def media_has_print(prelude):
    m = re.match(r"@media\b(.*)$", prelude, re.S | re.I)
    if not m:
        return False
    for q in m.group(1).split(","):
        words = re.findall(r"[a-z-]+", q.lower().split("(")[0])
        if "print" in words and "not" not in words:
            return True
    return False


def page_is_a4(body):
    for m in re.finditer(r"(?:^|[;{\s])size\s*:\s*([^;}]*)", body, re.I):
        v = m.group(1).lower()
        if re.search(r"\ba4\b", v) or re.search(r"\b210mm\s+297mm\b", v):
            return True
    return False


def css_refs(css, where):
    """Fault every reference out of the file in a piece of CSS."""
    css = css_strip_comments(css)
    for m in re.finditer(r"@import\b\s*([^;]*)", css, re.I):
        fault(where, "CSS @import %s (the report must not load stylesheets)" % short(m.group(1), 50))
    for m in re.finditer(r"\burl\(\s*(\"[^\"]*\"|'[^']*'|[^)]*?)\s*\)", css, re.I):
        v = m.group(1).strip("\"' \t\n")
        if not v.lower().startswith("data:") and not v.startswith("#"):
            fault(where, "CSS url(%s) refers outside the report" % short(v, 50))
    for m in re.finditer(r"image-set\(([^)]*)\)", css, re.I):
        for s in re.findall(r"\"([^\"]*)\"|'([^']*)'", m.group(1)):
            v = s[0] or s[1]
            if not v.lower().startswith("data:"):
                fault(where, "CSS image-set(%s) refers outside the report" % short(v, 50))


# ---- structure ----------------------------------------------------------------

URL_ATTRS = ("src", "href", "srcset", "imagesrcset", "data", "poster", "background",
             "action", "formaction", "xlink:href", "ping", "manifest", "codebase",
             "archive", "lowsrc", "dynsrc", "icon")


def elements(node):
    """The elements under node, in document order (no recursion: a deep
    document must not overflow the stack)."""
    stack = list(reversed(node.childNodes))
    while stack:
        c = stack.pop()
        if c.nodeType == c.ELEMENT_NODE:
            yield c
            stack.extend(reversed(c.childNodes))


def text_of(node):
    if node.nodeType == node.TEXT_NODE:
        return node.data
    out, stack = [], list(reversed(node.childNodes))
    while stack:
        c = stack.pop()
        if c.nodeType == c.TEXT_NODE:
            out.append(c.data)
        else:
            stack.extend(reversed(c.childNodes))
    return "".join(out)


def describe(el, index):
    return "<%s> %d" % (el.tagName, index)


def check_structure(raw, min_images):
    import html5lib
    from html5lib.constants import E as html5lib_messages
    info = {"images": []}
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as e:
        fault("document", "not valid UTF-8 at byte %d" % e.start)
        text = raw.decode("utf-8", "replace")
    if text.startswith("\ufeff"):
        text = text[1:]
    prefix_ok = re.match(r"\s*<!doctype\s+html\s*>", text, re.I) is not None
    if not prefix_ok:
        fault("document", "does not start with <!DOCTYPE html>")

    builder = html5lib.getTreeBuilder("dom")
    try:
        doc = html5lib.HTMLParser(tree=builder, strict=True).parse(text)
    except html5lib.html5parser.ParseError:
        # strict stops at the first error: parse again leniently to list them
        # all and to go on checking the tree a browser would build
        parser = html5lib.HTMLParser(tree=builder, strict=False)
        doc = parser.parse(text)
        for (line, col), code, data in parser.errors[:10]:
            try:
                msg = html5lib_messages.get(code, code) % data
            except (TypeError, KeyError, ValueError):
                msg = code
            fault("parse line %d col %d" % (line, col), "HTML parse error: %s [%s]" % (msg, code))
        if len(parser.errors) > 10:
            fault("parse", "%d more HTML parse errors" % (len(parser.errors) - 10))
        if not parser.errors:
            fault("parse", "html5lib's strict parser refused the document")

    dt = [c for c in doc.childNodes if c.nodeType == c.DOCUMENT_TYPE_NODE]
    if prefix_ok and (not dt or dt[0].name != "html" or dt[0].publicId or dt[0].systemId):
        fault("document", "no <!DOCTYPE html> (a plain HTML5 doctype is required)")

    html = doc.documentElement
    if not html.getAttribute("lang").strip():
        fault("<html>", "no lang attribute")

    counters = {}
    all_els = []
    for el in elements(doc):
        counters[el.tagName] = counters.get(el.tagName, 0) + 1
        all_els.append((el, counters[el.tagName]))
    byname = lambda t: [e for e, _ in all_els if e.tagName == t]

    metas = [m for m in byname("meta") if m.hasAttribute("charset")]
    if not metas:
        fault("<head>", "no <meta charset=utf-8>")
    for m in metas:
        if m.getAttribute("charset").strip().lower() != "utf-8":
            fault("<meta>", "charset is %r, not utf-8" % m.getAttribute("charset"))
    if any(m.getAttribute("charset").strip().lower() == "utf-8" for m in metas) and \
            not re.search(rb"<meta[^>]*charset\s*=\s*[\"']?utf-8", raw[:1024], re.I):
        fault("<meta charset>", "not within the first 1024 bytes (browsers look no further)")

    titles = byname("title")
    if len(titles) != 1:
        fault("<head>", "%d <title> elements, expected 1" % len(titles))
    elif not text_of(titles[0]).strip():
        fault("<title>", "empty")
    h1 = byname("h1")
    if len(h1) != 1:
        fault("<body>", "%d <h1> elements, expected exactly 1" % len(h1))

    # scripts and references out of the file
    for el, k in all_els:
        where = describe(el, k)
        if el.tagName == "script":
            fault(where, "<script> present%s (the report must need and hold no script)"
                  % (" (src=%s)" % short(el.getAttribute("src"), 40) if el.hasAttribute("src") else ""))
        if el.tagName == "base":
            fault(where, "<base> changes where references point")
        if el.tagName == "meta" and el.getAttribute("http-equiv").strip().lower() == "refresh":
            fault(where, "meta refresh (the report must not navigate)")
        for i in range(el.attributes.length):
            a = el.attributes.item(i)
            name, value = a.name.lower(), a.value
            if name.startswith("on"):
                fault(where, "event handler attribute %s (script)" % name)
            elif name == "style":
                css_refs(value, where + " style attribute")
            elif name in URL_ATTRS:
                if el.tagName == "img" and name == "src":
                    continue                                 # checked below
                vals = [v.strip().split()[0] for v in value.split(",") if v.strip()] \
                    if name.endswith("srcset") else [value.strip()]
                for v in vals:
                    low = re.sub(r"[\s\x00-\x1f]", "", v).lower()
                    if low.startswith("javascript:"):
                        fault(where, "%s is a javascript: URL (script)" % name)
                    elif not (low.startswith("data:") or v.startswith("#")):
                        fault(where, "%s=%r refers outside the report" % (name, short(v, 50)))

    # style sheets: references, and the print stylesheet
    styles = byname("style")
    if not styles:
        fault("<head>", "no <style> element (a print stylesheet for A4 is required)")
    css = "\n".join(css_strip_comments(text_of(s)) for s in styles)
    for s in styles:
        css_refs(text_of(s), "<style> %d" % (styles.index(s) + 1))
    prints = [body for prelude, body in css_blocks(css) if media_has_print(prelude)]
    top_a4 = any(p.lower().startswith("@page") and page_is_a4(b) for p, b in css_blocks(css))
    if styles and not prints:
        fault("<style>", "no @media print block")
    elif prints:
        a4 = any(p.lower().startswith("@page") and page_is_a4(b)
                 for body in prints for p, b in css_blocks(body))
        if not a4:
            fault("<style> @media print", "no @page rule with size A4 inside the print block%s"
                  % (" (there is one outside it)" if top_a4 else ""))

    # images
    imgs = byname("img")
    for k, el in enumerate(imgs, 1):
        alt = el.getAttribute("alt").strip()
        where = "<img> %d%s" % (k, " (alt %r)" % short(alt, 30) if alt else "")
        if not alt:
            fault(where, "no alt text")
        src = el.getAttribute("src").strip()
        m = re.match(r"data:image/png;base64,(.*)$", src, re.I | re.S)
        if not src:
            fault(where, "no src")
            continue
        if not m:
            fault(where, "src %r is not a data:image/png;base64 URI" % short(src, 50))
            continue
        b64 = re.sub(r"[\t\n\f\r ]", "", m.group(1))
        try:
            data = base64.b64decode(b64, validate=True)
        except (binascii.Error, ValueError) as e:
            bad = re.search(r"[^A-Za-z0-9+/=]", b64)
            fault(where, "base64 does not decode (%s%s)"
                  % (e, ", bad character at offset %d" % bad.start() if bad else ""))
            continue
        try:
            w, h, depth, kind = png_check(data)
        except PngError as e:
            fault(where, "PNG does not decode: %s" % e)
            continue
        try:
            shape = png_full_decode(data)
            if shape[0] != h or shape[1] != w:
                fault(where, "skimage decodes %s, IHDR says %dx%d" % ("x".join(map(str, shape)), w, h))
        except Exception as e:          # noqa: BLE001 - any decoder complaint is a fault
            fault(where, "PNG does not decode in skimage: %s" % short(str(e), 80))
            continue
        info["images"].append((k, w, h, depth, kind, len(data)))
    info["img_count"] = len(imgs)
    if len(imgs) < min_images:
        fault("<body>", "%d <img> elements, at least %d expected" % (len(imgs), min_images))
    return info


# ---- browser ------------------------------------------------------------------

NOISE = re.compile(r"dbus|unexpected operator|Fontconfig|gcm_|ALSA|sandbox|"
                   r"bytes written to file|^\s*$|DevTools listening|dri3|libva|GPU", re.I)


def chromium_run(cmd, tmp, label, timeout):
    """Run chromium with a private profile; return (ok, seconds, stdout)."""
    profile = os.path.join(tmp, "profile-" + label)
    env = dict(os.environ, HOME=tmp, XDG_CONFIG_HOME=os.path.join(tmp, "config"),
               XDG_CACHE_HOME=os.path.join(tmp, "cache"))
    full = [cmd[0], "--headless", "--no-sandbox", "--disable-gpu", "--user-data-dir=" + profile,
            "--no-first-run", "--no-default-browser-check", "--disable-background-networking",
            "--host-resolver-rules=MAP * ~NOTFOUND"] + cmd[1:]
    t0 = time.monotonic()
    p = subprocess.Popen(full, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, env=env, start_new_session=True)
    try:
        out, err = p.communicate(timeout=timeout)
        timed_out = False
    except subprocess.TimeoutExpired:
        timed_out = True
    finally:
        try:                                   # chromium's helpers, in its own group
            os.killpg(p.pid, signal.SIGKILL)
        except (ProcessLookupError, PermissionError):
            pass
    if timed_out:
        p.communicate()
        fault("chromium " + label, "timed out after %g s" % timeout)
        return False, time.monotonic() - t0, b""
    secs = time.monotonic() - t0
    if p.returncode != 0:
        lines = [l for l in err.decode("utf-8", "replace").splitlines() if not NOISE.search(l)]
        fault("chromium " + label, "exit status %d%s" % (p.returncode,
              ": " + short(lines[-1], 120) if lines else ""))
        return False, secs, out
    return True, secs, out


# Written at the load event (complete, naturalWidth: what the count is made
# of) and rewritten as each decode() settles; a decode() still pending when
# the virtual time budget runs out (a loaded machine) is no fault, a rejected
# one is.
PROBE_JS = """
window.addEventListener('load', function () {
  var text = document.body ? document.body.innerText : '';
  var imgs = Array.prototype.slice.call(document.images);
  var out = document.createElement('pre');
  out.id = '%s';
  out.hidden = true;
  document.documentElement.appendChild(out);
  var rs = imgs.map(function (im, i) {
    return {index: i + 1, complete: im.complete, width: im.naturalWidth, height: im.naturalHeight,
            alt: im.alt, decode: 'pending'};
  });
  function write() {
    var ok = rs.filter(function (r) { return r.complete && r.width > 0; });
    out.textContent = JSON.stringify({decoded: ok.length, total: rs.length, images: rs, text: text});
  }
  write();
  imgs.forEach(function (im, i) {
    im.decode().then(function () { rs[i].decode = 'ok'; write(); },
                     function (e) { rs[i].decode = String(e && e.name || e); write(); });
  });
});
""" % PROBE_ID


def probe_copy(text, path):
    """The report with the probe script appended (before </body> if there is
    one). A Content-Security-Policy in a <meta> would block the probe, so the
    probe's hash is added to its script-src (or default-src)."""
    js = PROBE_JS
    digest = "'sha256-%s'" % base64.b64encode(hashlib.sha256(js.encode()).digest()).decode()

    def fix_meta(m):
        tag = m.group(0)
        if not re.search(r"http-equiv\s*=\s*[\"']?content-security-policy", tag, re.I):
            return tag
        c = re.search(r"content\s*=\s*(\"([^\"]*)\"|'([^']*)')", tag, re.I)
        if not c:
            return tag
        policy = c.group(2) if c.group(2) is not None else c.group(3)
        dirs = [d.strip() for d in policy.split(";") if d.strip()]
        names = [d.split()[0].lower() for d in dirs]
        key = "script-src" if "script-src" in names else "default-src" if "default-src" in names else None
        if key is None:
            return tag
        i = names.index(key)
        srcs = [s for s in dirs[i].split()[1:] if s.lower() != "'none'"]
        dirs[i] = " ".join([key] + srcs + [digest])
        return tag[:c.start(1)] + '"%s"' % "; ".join(dirs).replace('"', "&quot;") + tag[c.end(1):]

    text = re.sub(r"<meta\b[^>]*>", fix_meta, text, flags=re.I)
    script = "<script>%s</script>\n" % js
    i = text.lower().rfind("</body>")
    text = text[:i] + script + text[i:] if i >= 0 else text + script
    with open(path, "w", encoding="utf-8") as f:
        f.write(text)


def rendered_probe(dom):
    """The probe's JSON out of a dumped DOM, or None."""
    import html5lib
    doc = html5lib.parse(dom, treebuilder="dom")
    for el in elements(doc):
        if el.tagName == "pre" and el.getAttribute("id") == PROBE_ID:
            try:
                return json.loads(text_of(el))
            except ValueError:
                return None
    return None


def check_screenshot(path, min_ink, min_colours):
    import numpy as np
    import skimage.io
    info = {}
    if not os.path.isfile(path) or os.path.getsize(path) == 0:
        fault("screenshot", "%s was not written" % path)
        return info
    try:
        img = skimage.io.imread(path)
    except Exception as e:                     # noqa: BLE001
        fault("screenshot", "%s does not decode: %s" % (path, short(str(e), 80)))
        return info
    h, w = img.shape[:2]
    info["size"] = (w, h)
    if (w, h) != (VIEW_W, VIEW_H):
        fault("screenshot", "%dx%d, expected %dx%d" % (w, h, VIEW_W, VIEW_H))
    rgb = img[..., :3] if img.ndim == 3 else np.stack([img] * 3, -1)
    rgb = rgb.astype(np.uint32)
    ink = float((rgb.min(axis=-1) < 245).mean())
    colours = int(np.unique((rgb[..., 0] << 16) | (rgb[..., 1] << 8) | rgb[..., 2]).size)
    info["ink"], info["colours"] = ink, colours
    if ink < min_ink:
        fault("screenshot", "blank: %.2f %% of pixels are not white, at least %.1f %% expected"
              % (100 * ink, 100 * min_ink))
    if colours < min_colours:
        fault("screenshot", "flat: %d distinct colours, at least %d expected" % (colours, min_colours))
    return info


def check_pdf(path):
    info = {}
    if not os.path.isfile(path):
        fault("pdf", "was not written")
        return info
    data = open(path, "rb").read()
    info["bytes"] = len(data)
    if not data.startswith(b"%PDF-"):
        fault("pdf", "does not start with %PDF-")
    if b"%%EOF" not in data[-64:]:
        fault("pdf", "does not end with %%EOF")
    if len(data) <= MIN_PDF_BYTES:
        fault("pdf", "only %d bytes, more than %d expected" % (len(data), MIN_PDF_BYTES))
    pages = len(re.findall(rb"/Type\s*/Page(?![A-Za-z])", data))
    info["pages"] = pages
    if pages == 0:
        fault("pdf", "no /Type /Page object")
    boxes = [tuple(float(v) for v in m.group(1).split())
             for m in re.finditer(rb"/MediaBox\s*\[\s*([-\d.\s]+?)\s*\]", data)]
    info["a4"] = True
    for k, b in enumerate(boxes, 1):
        if len(b) != 4:
            continue
        pw, ph = abs(b[2] - b[0]), abs(b[3] - b[1])
        if abs(pw - A4_PT[0]) > A4_TOL_PT or abs(ph - A4_PT[1]) > A4_TOL_PT:
            info["a4"] = False
            fault("pdf page %d" % k, "%.0f x %.0f pt, not A4 portrait (%.0f x %.0f pt): "
                  "the print stylesheet's @page size did not apply" % (pw, ph, A4_PT[0], A4_PT[1]))
            break
    return info


def check_browser(report, text, args, tmp):
    info = {}
    chromium = args.chromium
    if not shutil.which(chromium):
        fault("chromium", "%s not found (Debian package chromium)" % chromium)
        return info
    url = pathlib.Path(report).as_uri()
    # 1. screenshot of the report itself
    shot = os.path.abspath(args.screenshot)
    if os.path.exists(shot):
        os.unlink(shot)
    ok, secs, _ = chromium_run([chromium, "--hide-scrollbars", "--window-size=%d,%d" % (VIEW_W, VIEW_H),
                                "--screenshot=" + shot, url], tmp, "screenshot", args.timeout)
    info["shot_secs"] = secs
    if ok:
        info["shot"] = check_screenshot(shot, args.min_ink, args.min_colours)

    # 2. the probe copy: images decoded in the browser, rendered text
    copy = os.path.join(tmp, "probe-copy.html")
    probe_copy(text, copy)
    ok, _, dom = chromium_run([chromium, "--virtual-time-budget=5000", "--dump-dom", pathlib.Path(copy).as_uri()],
                              tmp, "dump-dom", args.timeout)
    if ok:
        pr = rendered_probe(dom.decode("utf-8", "replace"))
        if pr is None:
            fault("browser", "the probe script left no result in the dumped DOM (did the page load?)")
        else:
            info["probe"] = pr
            for r in pr["images"]:
                if not (r["complete"] and r["width"] > 0 and r["decode"] in ("ok", "pending")):
                    fault("<img> %d%s" % (r["index"], " (alt %r)" % short(r["alt"], 30) if r["alt"] else ""),
                          "not decoded in the browser (complete=%s, naturalWidth=%d, decode()=%s)"
                          % (str(r["complete"]).lower(), r["width"], r["decode"]))
            if pr["decoded"] < args.min_images:
                fault("browser", "%d images decoded, at least %d expected" % (pr["decoded"], args.min_images))
            rendered = " ".join(pr["text"].split())
            for t in args.expect or []:
                if " ".join(t.split()) not in rendered:
                    fault("rendered text", "expected text %r not found" % t)

    # 3. print to PDF
    pdf = os.path.abspath(args.pdf) if args.pdf else os.path.join(tmp, "report.pdf")
    if os.path.exists(pdf):
        os.unlink(pdf)
    ok, _, _ = chromium_run([chromium, "--no-pdf-header-footer", "--print-to-pdf=" + pdf, url],
                            tmp, "print-to-pdf", args.timeout)
    if ok:
        info["pdf"] = check_pdf(pdf)
    return info


# ---- main ---------------------------------------------------------------------

def main():
    ap = argparse.ArgumentParser(description="Check a plyledger disposition report (HTML) "
                                 "structurally and in headless chromium.")
    ap.add_argument("report")
    ap.add_argument("--screenshot", required=True, metavar="OUT.png")
    ap.add_argument("--min-images", type=int, default=0, metavar="N")
    ap.add_argument("--expect", action="append", metavar="TEXT",
                    help="text that must occur in the rendered text (repeatable)")
    ap.add_argument("--chromium", default="chromium", metavar="PATH")
    ap.add_argument("--pdf", metavar="OUT.pdf", help="keep the printed PDF here")
    ap.add_argument("--timeout", type=float, default=60, metavar="SECONDS",
                    help="per chromium run (default 60)")
    ap.add_argument("--min-ink", type=float, default=0.02, metavar="FRACTION",
                    help="least share of non-white screenshot pixels (default 0.02)")
    ap.add_argument("--min-colours", type=int, default=32, metavar="N",
                    help="least number of distinct screenshot colours (default 32)")
    args = ap.parse_args()
    t0 = time.monotonic()

    report = os.path.abspath(args.report)
    try:
        raw = open(report, "rb").read()
    except OSError as e:
        print("FAULT: %s: cannot read: %s" % (args.report, e.strerror), file=sys.stderr)
        return 1
    try:
        import html5lib  # noqa: F401
        import numpy  # noqa: F401
        import skimage.io  # noqa: F401
    except ImportError as e:
        print("FAULT: python: %s (run with Debian's /usr/bin/python3 and python3-html5lib, "
              "python3-numpy, python3-skimage)" % e, file=sys.stderr)
        return 1

    st = check_structure(raw, args.min_images)
    text = raw.decode("utf-8", "replace")
    with tempfile.TemporaryDirectory(prefix="check-report-") as tmp:
        br = check_browser(report, text, args, tmp)

    print("report: %s (%d bytes)" % (args.report, len(raw)))
    imgs = ", ".join("%d: %dx%d %d-bit %s %d B" % i for i in st["images"])
    print("images: %d <img>, %d PNG decoded%s" % (st["img_count"], len(st["images"]),
                                                 " (%s)" % imgs if imgs else ""))
    if "shot" in br and "size" in br["shot"]:
        s = br["shot"]
        print("screenshot: %s %dx%d, %.1f %% not white, %d colours, rendered in %.2f s"
              % (args.screenshot, s["size"][0], s["size"][1], 100 * s["ink"], s["colours"], br["shot_secs"]))
    if "probe" in br:
        print("browser: %d of %d images decoded, %d expected texts checked"
              % (br["probe"]["decoded"], br["probe"]["total"], len(args.expect or [])))
    if "pdf" in br and "pages" in br["pdf"]:
        print("pdf: %d bytes, %d pages%s" % (br["pdf"]["bytes"], br["pdf"]["pages"],
                                            ", A4" if br["pdf"]["a4"] else ""))
    secs = time.monotonic() - t0
    if faults:
        for f in faults:
            print("FAULT: " + f, file=sys.stderr)
        print("result: %d faults (%.1f s)" % (len(faults), secs))
        return 1
    print("result: ok (%.1f s)" % secs)
    return 0


if __name__ == "__main__":
    sys.exit(main())
