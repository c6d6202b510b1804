"""Screenshots of the review page on the demo season, for docs/ (run by hand, not a test).

Runs ``pulsesort demo`` into a temporary folder (or uses ``--demo DIR``, a folder it
wrote before), starts the review server on a copy of the demo's label store (the
demo's own store is not touched) with the demo's model, and photographs the page in
the headless Chromium at ``/usr/bin/chromium``:

* ``review-1366x768.png``, ``review-1920x1080.png``: the first screen of the first
  queued pulse, as an analyst sees it on a laptop and on a large screen;
* ``review-1366x768-lower.png``: the same laptop screen scrolled down to the sources
  and look-alikes (the decision bar stays);
* ``review-1366x768-help.png``: the help overlay (key ``?``).

Usage (from the repository root, in the project's venv)::

    python benchmarks/shoot_review.py --out docs
    python benchmarks/shoot_review.py --demo pulsesort-demo --out docs
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync"]
SIZES = [(1366, 768), (1920, 1080)]


def _demo(folder: Path) -> Path:
    """Run ``pulsesort demo`` into ``folder`` (the demo's own command line)."""
    subprocess.run([sys.executable, "-m", "classify.cli", "demo", "--dir", str(folder)],
                   check=True)
    return folder


def _settle(page):
    page.wait_for_function("() => document.body.dataset.pending === '0' && "
                           "!!document.body.dataset.event", timeout=60_000)


def shoot(demo: Path, out: Path, work: Path) -> list[Path]:
    from playwright import sync_api

    from classify.commands.review import model_attributions
    from classify.review import ReviewSession, make_server
    from classify.review._lookalike import card_catalog_paths, find_model
    from classify.triage import read_results
    from features import open_catalog

    results = read_results(demo / "hollowmere-2032.triage.csv")
    model, card = find_model(results, registry=demo / "models")
    store = work / "labels.sqlite"
    shutil.copy(demo / "labels.sqlite", store)
    session = ReviewSession(results, open_catalog(demo / "hollowmere-2032"), store, "wren",
                            model=model, catalog_paths=card_catalog_paths(card),
                            attributions=model_attributions(model))
    server = make_server(session)
    server.start_background()
    out.mkdir(parents=True, exist_ok=True)
    written = []
    try:
        with sync_api.sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
            for w, h in SIZES:
                page = browser.new_page(viewport={"width": w, "height": h})
                page.goto(server.url)
                _settle(page)
                written.append(out / f"review-{w}x{h}.png")
                page.screenshot(path=str(written[-1]))
                if (w, h) == SIZES[0]:
                    page.evaluate("document.getElementById('sources').scrollIntoView()")
                    written.append(out / f"review-{w}x{h}-lower.png")
                    page.screenshot(path=str(written[-1]))
                    page.evaluate("window.scrollTo(0, 0)")
                    page.keyboard.press("?")
                    written.append(out / f"review-{w}x{h}-help.png")
                    page.screenshot(path=str(written[-1]))
                page.close()
            browser.close()
    finally:
        server.shutdown()
        server.server_close()
    return written


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--demo", type=Path, default=None,
                    help="a folder 'pulsesort demo' wrote (default: run the demo now)")
    ap.add_argument("--out", type=Path, default=Path("docs"), help="where the PNGs go")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="pulsesort-shots-") as tmp:
        work = Path(tmp)
        demo = args.demo if args.demo is not None else _demo(work / "pulsesort-demo")
        for path in shoot(demo, args.out, work):
            print(f"wrote {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
