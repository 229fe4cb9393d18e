"""Regenerate docs/summary.png: scan the demo night, render its page, photograph it in headless chromium.

    PYTHONPATH=. python docs/make_screenshot.py [--height 2600] [--out docs/summary.png]
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=ROOT / "docs" / "summary.png")
    ap.add_argument("--width", type=int, default=1240)
    ap.add_argument("--height", type=int, default=2600, help="window height [px]: how much of the page is shown")
    args = ap.parse_args()
    exe = shutil.which("chromium") or shutil.which("chromium-browser")
    if exe is None:
        print("make_screenshot: chromium not found (apt-get install -y chromium)", file=sys.stderr)
        return 2
    from monitor.cli import run_scan
    from monitor.config import load_config

    with tempfile.TemporaryDirectory(prefix="ctwd-shot-") as tmp:
        out = Path(tmp) / "night"
        run_scan([ROOT / "sample_logs"], load_config(ROOT / "config"), out, quiet=True)
        page = out / "summary.html"
        cmd = [exe, "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
               "--disable-component-update", "--disable-sync", "--no-first-run", "--hide-scrollbars",
               "--force-device-scale-factor=1", f"--user-data-dir={Path(tmp) / 'profile'}",
               f"--window-size={args.width},{args.height}", f"--screenshot={args.out.resolve()}", page.as_uri()]
        subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, timeout=120)
    print(f"wrote {args.out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
