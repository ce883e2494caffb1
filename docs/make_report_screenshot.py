"""Make docs/report_screenshot.png, the picture of the report page the README shows.

Runs the demo study (unless --folder names a finished output folder), then
photographs the top of its report.html in headless Chromium (Debian package
``chromium``) and shrinks it to a small PNG.

    python docs/make_report_screenshot.py [--folder demo_results]
"""

import argparse
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync", "--hide-scrollbars"]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--folder", type=Path, help="a finished output folder (default: run the demo study)")
    parser.add_argument("--out", type=Path, default=ROOT / "docs" / "report_screenshot.png")
    parser.add_argument("--width", type=int, default=900, help="browser window width in CSS pixels")
    parser.add_argument("--height", type=int, default=1150, help="height of the photographed top of the page")
    args = parser.parse_args(argv)
    browser = next((shutil.which(n) for n in ("chromium", "chromium-browser", "google-chrome") if shutil.which(n)),
                   None)
    if browser is None:
        sys.exit("no Chromium found: install it (Debian: apt-get install chromium)")
    folder = args.folder
    if folder is None:
        import os
        from landflow.study.run import run_study
        os.chdir(ROOT)  # the page names the study file as given: relative, as a user would type it
        folder = Path(run_study(Path("demo_rasters") / "study.toml")["folder"])
    page = (folder / "report.html").resolve()
    with tempfile.TemporaryDirectory() as profile:
        shot = Path(profile) / "shot.png"
        subprocess.run([browser, *FLAGS, f"--user-data-dir={profile}/user",
                        f"--window-size={args.width},{args.height}", f"--screenshot={shot}", page.as_uri()],
                       check=True, capture_output=True, timeout=120)
        from PIL import Image  # matplotlib's own dependency
        with Image.open(shot) as image:
            small = image.convert("RGB").resize((args.width * 2 // 3, args.height * 2 // 3), Image.LANCZOS)
            small.quantize(colors=256, method=Image.Quantize.FASTOCTREE).save(args.out, optimize=True)  # a small file
    print(f"wrote {args.out}")


if __name__ == "__main__":
    main()
