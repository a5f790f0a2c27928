"""Check the built documentation site in a real headless browser: no broken internal link.

    python -m mkdocs build --strict && python docs/check_site.py [site_dir]

The script serves the built site (default ``site/``) on a free localhost port, loads the start page,
the API reference overview and each API topic page in headless Chromium (``--dump-dom``: the DOM after the page's scripts
ran), and collects every ``href`` of those rendered pages.  Each internal link (same host, or
relative) must resolve to a file of the built site, and a ``#fragment`` must name an element id of
the page it points to.  External links are listed, not fetched.  Exit status 0 when every internal
link resolves, 1 when one does not (each broken link is printed with the page that holds it), 2 when
no Chromium is found or the site has not been built.

Chromium comes from the system packages (``apt-get install -y chromium``); the binary is taken from
``$CHROMIUM`` or the first of chromium, chromium-browser, google-chrome on the PATH.  It runs with a
fresh temporary profile and without network services of its own (no sync, no component updates).
"""

from __future__ import annotations

import argparse
import functools
import html.parser
import http.server
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
import urllib.parse

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
    "--virtual-time-budget=5000",
]


def find_chromium() -> str | None:
    """The Chromium binary: $CHROMIUM, else the first known name on the PATH, else None."""
    env = os.environ.get("CHROMIUM")
    if env:
        return env if shutil.which(env) else None
    for name in ("chromium", "chromium-browser", "google-chrome"):
        path = shutil.which(name)
        if path:
            return path
    return None


class _Links(html.parser.HTMLParser):
    """Collects the href of every <a>/<link> and the id of every element."""

    def __init__(self):
        super().__init__()
        self.hrefs: list[str] = []
        self.ids: set[str] = set()

    def handle_starttag(self, tag, attrs):
        d = dict(attrs)
        if d.get("id"):
            self.ids.add(d["id"])
        if tag in ("a", "link") and d.get("href"):
            self.hrefs.append(d["href"])


def parse(text: str) -> _Links:
    p = _Links()
    p.feed(text)
    return p


def dump_dom(chromium: str, url: str, timeout: float = 120.0) -> str:
    """The rendered DOM of ``url`` from headless Chromium with a new temporary profile."""
    with tempfile.TemporaryDirectory(prefix="chromium-profile-") as profile:
        cmd = [chromium, *FLAGS, f"--user-data-dir={profile}", "--dump-dom", url]
        out = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout, check=False)
    if out.returncode != 0 or "<html" not in out.stdout.lower():
        raise RuntimeError(f"chromium failed on {url} (exit {out.returncode}): {out.stderr.strip()[-500:]}")
    return out.stdout


def site_file(site: str, path: str) -> str | None:
    """The file of the built site that serves URL path ``path`` (directory URLs serve index.html)."""
    local = os.path.normpath(os.path.join(site, urllib.parse.unquote(path).lstrip("/")))
    if not local.startswith(os.path.abspath(site)):
        return None
    if os.path.isdir(local):
        local = os.path.join(local, "index.html")
    return local if os.path.isfile(local) else None


class _QuietHandler(http.server.SimpleHTTPRequestHandler):
    def log_message(self, format, *args):
        pass


def pages_of(site: str) -> list[str]:
    """The start page, the API overview and every API topic page of the built site (URL paths)."""
    api = os.path.join(site, "api")
    topics = sorted(d + "/" for d in os.listdir(api) if os.path.isfile(os.path.join(api, d, "index.html")))
    return ["", "api/"] + ["api/" + t for t in topics]


def check(site: str, chromium: str) -> tuple[int, int, list[str], list[str]]:
    """(pages rendered, internal links checked, broken links, external links) of the start and API pages."""
    handler = functools.partial(_QuietHandler, directory=site)
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), handler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    base = f"http://127.0.0.1:{server.server_address[1]}/"
    broken, external, checked, rendered = [], set(), 0, 0
    ids_of: dict[str, set[str]] = {}
    try:
        for page in pages_of(site):
            url = urllib.parse.urljoin(base, page)
            dom = dump_dom(chromium, url)
            links = parse(dom)
            rendered += 1
            if not links.hrefs:
                broken.append(f"{url}: the rendered page has no links at all")
            if page.startswith("api/") and page != "api/" and "doc-object" not in dom:
                broken.append(f"{url}: no API entry was rendered on this page")
            for href in links.hrefs:
                target = urllib.parse.urljoin(url, href)
                parts = urllib.parse.urlsplit(target)
                if parts.scheme not in ("http", "https") or parts.netloc != urllib.parse.urlsplit(base).netloc:
                    if parts.scheme in ("http", "https"):
                        external.add(target)
                    continue
                checked += 1
                local = site_file(site, parts.path)
                if local is None:
                    broken.append(f"{url}: {href} -> {parts.path} is not in the built site")
                    continue
                if parts.fragment and local.endswith(".html"):
                    if local not in ids_of:
                        with open(local, encoding="utf-8") as fh:
                            ids_of[local] = parse(fh.read()).ids
                        if os.path.abspath(local) == os.path.abspath(
                            site_file(site, urllib.parse.urlsplit(url).path) or ""
                        ):
                            ids_of[local] |= links.ids  # ids the page's scripts added
                    if urllib.parse.unquote(parts.fragment) not in ids_of[local]:
                        broken.append(f"{url}: {href} -> no element with id {parts.fragment!r} in {parts.path}")
    finally:
        server.shutdown()
        server.server_close()
    return rendered, checked, broken, sorted(external)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("site", nargs="?", default=os.path.join(ROOT, "site"), help="the built site (default: site/)")
    args = ap.parse_args(argv)
    site = os.path.abspath(args.site)
    if not os.path.isfile(os.path.join(site, "index.html")):
        print(f"check_site: no built site at {site} (run: python -m mkdocs build --strict)", file=sys.stderr)
        return 2
    chromium = find_chromium()
    if chromium is None:
        print("check_site: no Chromium found (apt-get install -y chromium, or set CHROMIUM)", file=sys.stderr)
        return 2
    t0 = time.perf_counter()
    rendered, checked, broken, external = check(site, chromium)
    dt = time.perf_counter() - t0
    for line in broken:
        print("BROKEN", line)
    for url in external:
        print("external (not fetched):", url)
    print(
        f"check_site: {rendered} pages rendered in headless Chromium, {checked} internal links checked, "
        f"{len(broken)} broken, {len(external)} external links not fetched ({dt:.1f} s)"
    )
    return 1 if broken else 0


if __name__ == "__main__":
    sys.exit(main())
