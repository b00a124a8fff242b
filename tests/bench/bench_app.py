"""Benchmark: Voila cold start to the first chart on screen (target <= 6 s), and page weight.

Run: ``.venv/bin/python tests/bench/bench_app.py [--runs 3]``. Needs /usr/bin/chromium.
Prints, per run: server up (process start -> HTTP answer), page to first bokeh canvas, the
total, and the bytes the browser received; then the median and its ratio to the target.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests" / "browser"))

from browser_support import CHROMIUM, CHROMIUM_ARGS  # noqa: E402

from studykit.app.server import running_server  # noqa: E402

TARGET_S = 6.0
NOTEBOOK = ROOT / "notebooks" / "fixtures" / "chart.ipynb"


def one_run(playwright, extra_args=(), delay: float = 0.0) -> dict:
    browser = playwright.chromium.launch(executable_path=CHROMIUM, headless=True,
                                         args=CHROMIUM_ARGS)
    received = []
    try:
        t0 = time.perf_counter()
        with running_server(NOTEBOOK, env={"STUDYKIT_STUDY": ""},
                            extra_args=tuple(extra_args)) as url:
            t_up = t_open = time.perf_counter()
            if delay:
                time.sleep(delay)
                t_open = time.perf_counter()
            page = browser.new_page(viewport={"width": 1280, "height": 800})
            page.on("response", lambda r: received.append(r))
            page.goto(url, timeout=120_000)
            page.wait_for_selector("canvas", state="attached", timeout=120_000)
            t_chart = time.perf_counter()
            size = 0
            for r in received:
                try:
                    size += int(r.headers.get("content-length") or len(r.body()))
                except Exception:  # noqa: BLE001 - streamed or redirected responses
                    pass
    finally:
        browser.close()
    return {"server_up": t_up - t0, "page_to_chart": t_chart - t_open,
            "total": (t_up - t0) + (t_chart - t_open), "bytes": size}


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--preheat", action="store_true",
                        help="start Voila with --preheat_kernel=True (what `studykit serve` does)")
    parser.add_argument("--delay", type=float, default=0.0,
                        help="open the page this many seconds after the server answers "
                             "(a visitor arriving later; with --preheat the kernel is ready)")
    args = parser.parse_args()
    from playwright.sync_api import sync_playwright

    results = []
    with sync_playwright() as p:
        for i in range(args.runs):
            r = one_run(p, ["--preheat_kernel=True"] if args.preheat else [], args.delay)
            results.append(r)
            later = f" (page opened {args.delay:.0f} s later)" if args.delay else ""
            print(f"run {i + 1}{later}: server up {r['server_up']:.2f} s, page to first chart "
                  f"{r['page_to_chart']:.2f} s, total {r['total']:.2f} s, "
                  f"received {r['bytes'] / 1024:.0f} KiB", flush=True)
    if args.delay:
        median = statistics.median(r["page_to_chart"] for r in results)
        print(f"median page to first chart (visitor arriving {args.delay:.0f} s after start): "
              f"{median:.2f} s; target {TARGET_S:.1f} s; ratio {median / TARGET_S:.2f}")
        return 0
    median = statistics.median(r["total"] for r in results)
    print(f"median cold start to first chart: {median:.2f} s; target {TARGET_S:.1f} s; "
          f"ratio {median / TARGET_S:.2f} ({'met' if median <= TARGET_S else 'NOT met'})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
