"""Several people at once: real browser sessions against the page served on 127.0.0.1.

Starts ``streamlit run ui/app.py`` on a free loopback port (a fresh server process), then:

1. cold start: the first browser opens the page; time until the demo's ranked table shows;
2. one session alone: open the page, upload a 20,000-row file, time until its ranked table shows;
3. rounds of four concurrent sessions (separate browser contexts, so separate Streamlit
   sessions), each uploading its own 20,000-row file (new files every round, so the caches
   fill); each session's time from page load to its ranked table; the server's resident
   memory (VmRSS from /proc) after every round.

Prints the concurrency ratio (each concurrent session's time / the lone session's time; two
cores cannot do better than 2×) and the memory growth from round 1 to round 5.
Goals (issue 14, section 3): ratio ≤ 2.5 for each of the four; growth ≤ 300 MB; cold start ≤ 4 s.

The machine is shared, and other people's work comes and goes within a run: so each round is
paired with a lone session (its own new file) measured just before it, and the ratio is also
given against that paired lone time. The load average and the CPU seconds per session are printed
beside each figure: the server's, and the browser's (its tab's renderer, Chromium's compositor, the
rest of Chromium). The browsers run on the same two cores as the server here, so a session costs
the machine its server CPU plus its browser CPU.

    .venv/bin/python bench/page_sessions_bench.py [--rows 20000] [--rounds 5] [--sessions 4]
"""
from __future__ import annotations

import argparse
import asyncio
import os
import socket
import statistics
import subprocess
import sys
import tempfile
import time
import urllib.request

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)
CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
        "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic"]
RANKED = '[data-testid="stDataFrame"]'


def start_server(home: str) -> tuple[subprocess.Popen, str]:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    log = open(os.path.join(home, "streamlit.log"), "w")
    proc = subprocess.Popen(
        [sys.executable, "-m", "streamlit", "run", os.path.join(ROOT, "ui", "app.py"), "--server.headless", "true",
         "--server.port", str(port), "--server.address", "127.0.0.1", "--browser.gatherUsageStats", "false",
         "--server.fileWatcherType", "none"], cwd=ROOT, stdout=log, stderr=subprocess.STDOUT,
        env={**os.environ, "HOME": home})
    url = f"http://127.0.0.1:{port}"
    deadline = time.time() + 60
    while time.time() < deadline:
        try:
            if urllib.request.urlopen(url + "/_stcore/health", timeout=2).read() == b"ok":
                return proc, url
        except OSError:
            time.sleep(0.2)
    proc.terminate()
    raise RuntimeError("streamlit did not start")


def cpu_s(pid: int) -> float:
    """User + system CPU seconds of a process so far (from /proc)."""
    with open(f"/proc/{pid}/stat") as fh:
        fields = fh.read().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def load() -> str:
    return "load " + " ".join(f"{x:.1f}" for x in os.getloadavg())


def browser_cpu() -> dict[int, tuple[str, float]]:
    """CPU seconds so far of every Chromium process started by this script, by pid, with its kind:
    ``tab`` (a page's renderer), ``compositor`` (Chromium's GPU process, drawing in software here)
    or ``other`` (the browser, network and utility processes)."""
    procs = {}
    for d in os.listdir("/proc"):
        if not d.isdigit():
            continue
        try:
            with open(f"/proc/{d}/stat") as fh:
                name, rest = fh.read().split(" (", 1)[1].rsplit(")", 1)
            with open(f"/proc/{d}/cmdline", "rb") as fh:
                cmd = fh.read().replace(b"\0", b" ").decode(errors="replace")
        except OSError:
            continue
        f = rest.split()
        procs[int(d)] = (int(f[1]), cmd, (int(f[11]) + int(f[12])) / os.sysconf("SC_CLK_TCK"))
    mine, out = {os.getpid()}, {}
    for _ in range(6):  # descendants, a few generations deep (driver → browser → zygote → renderer)
        mine |= {pid for pid, (ppid, _, _) in procs.items() if ppid in mine}
    for pid in mine - {os.getpid()}:
        _, cmd, cpu = procs[pid]
        if "chrom" not in cmd:
            continue
        kind = "tab" if "--type=renderer" in cmd else "compositor" if "--type=gpu-process" in cmd else "other"
        out[pid] = (kind, cpu)
    return out


def cpu_split(before: dict, after: dict, n: int) -> str:
    """Browser CPU between two snapshots (processes alive at the second), per session."""
    kinds: dict[str, float] = {}
    for pid, (kind, cpu) in after.items():
        kinds[kind] = kinds.get(kind, 0.0) + cpu - before.get(pid, (kind, 0.0))[1]
    return ", ".join(f"{k} {kinds.get(k, 0.0) / n:.2f}" for k in ("tab", "compositor", "other"))


def rss_mb(pid: int) -> float:
    with open(f"/proc/{pid}/status") as fh:
        for line in fh:
            if line.startswith("VmRSS:"):
                return int(line.split()[1]) / 1024
    return float("nan")


async def session(browser, url: str, path: str | None, n: int | None, keep: list | None = None) -> float:
    """Open the page (and upload ``path``); seconds until the ranked table of this file shows.
    With ``keep``, the tab is left open there (closed later, after its CPU has been read)."""
    ctx = await browser.new_context(viewport={"width": 1280, "height": 1400})
    page = await ctx.new_page()
    t = time.perf_counter()
    await page.goto(url, wait_until="domcontentloaded")
    await page.get_by_text("The whole model first").wait_for(timeout=300_000)
    await page.locator(RANKED).nth(1).wait_for(timeout=300_000)
    if path is not None:
        await page.locator('[data-testid="stFileUploader"] input[type="file"]').set_input_files(path)
        await page.get_by_text(f"Using the uploaded file {os.path.basename(path)}").wait_for(timeout=300_000)
        await page.locator('[data-testid="stMetric"]').filter(has_text=f"{n:,}").first.wait_for(timeout=300_000)
        await page.locator(RANKED).nth(1).wait_for(timeout=300_000)
        await page.locator('[data-testid="stStatusWidget"]').wait_for(state="detached", timeout=300_000)
    took = time.perf_counter() - t
    if keep is None:
        await ctx.close()
    else:
        keep.append(ctx)
    return took


async def close(keep: list) -> None:
    while keep:
        await keep.pop().close()


def make_file(folder: str, rows: int, seed: int) -> str:
    from demo.generate import generate

    path = os.path.join(folder, f"upload-{seed}.csv")
    generate(rows, seed=seed).to_csv(path, index=False)
    return path


async def main_async(a) -> int:
    from playwright.async_api import async_playwright

    folder = tempfile.mkdtemp(prefix="fissure-sessions-")
    # 20,000 + seed rows: each file's row count is its own (and differs from the demo's).
    n_files = 1 + a.rounds * (a.sessions + 1)
    files = {seed: make_file(folder, a.rows + seed, seed) for seed in range(1, 1 + n_files)}
    proc, url = start_server(folder)
    try:
        async with async_playwright() as pw:
            browser = await pw.chromium.launch(executable_path=CHROMIUM, headless=True, args=ARGS)
            print(f"start: {load()}")
            cold = await session(browser, url, None, None)
            print(f"cold start (fresh server, first open until the demo's ranked table shows): {cold:.2f} s "
                  f"(goal ≤ 4 s); server {rss_mb(proc.pid):.0f} MB; {load()}")
            warm = await session(browser, url, None, None)
            print(f"second open (warm server): {warm:.2f} s")
            alone = []
            for _ in range(2):
                c0 = cpu_s(proc.pid)
                alone.append(await session(browser, url, files[1], a.rows + 1))
                c1 = cpu_s(proc.pid)
            base = min(alone)
            print(f"one session alone, page load to ranked table of a {a.rows:,}-row upload: "
                  + ", ".join(f"{x:.2f}" for x in alone) + f" s (best {base:.2f} s); server CPU {c1 - c0:.2f} s "
                  f"for the second (its file cached); {load()}")
            mem, ratios, paired = [], [], []
            seed = 2
            for r in range(a.rounds):
                tabs: list = []
                c0, b0 = cpu_s(proc.pid), browser_cpu()
                lone = await session(browser, url, files[seed], a.rows + seed, tabs)
                lone_cpu, lone_split = cpu_s(proc.pid) - c0, cpu_split(b0, browser_cpu(), 1)
                await close(tabs)
                seed += 1
                todo = []
                for _ in range(a.sessions):
                    todo.append(session(browser, url, files[seed], a.rows + seed, tabs))
                    seed += 1
                c0, b0, t = cpu_s(proc.pid), browser_cpu(), time.perf_counter()
                times = await asyncio.gather(*todo)
                wall, round_cpu = time.perf_counter() - t, cpu_s(proc.pid) - c0
                round_split = cpu_split(b0, browser_cpu(), a.sessions)
                await close(tabs)
                mem.append(rss_mb(proc.pid))
                rr = [x / base for x in times]
                pr = [x / lone for x in times]
                ratios += rr
                paired += pr
                print(f"round {r + 1}: lone just before {lone:.2f} s (CPU s: server {lone_cpu:.2f}, {lone_split}); "
                      f"{a.sessions} at once "
                      + ", ".join(f"{x:.2f}" for x in times) + " s; ratio to that lone "
                      + ", ".join(f"{x:.2f}" for x in pr) + f" (max {max(pr):.2f}), to the best lone "
                      + ", ".join(f"{x:.2f}" for x in rr) + f"; wall {wall:.2f} s; server CPU "
                      f"{round_cpu / a.sessions:.2f} s per session, browser per session {round_split}; server {mem[-1]:.0f} MB; "
                      f"{load()}")
            await browser.close()
        print(f"\nconcurrency, against the lone session measured just before each round: worst "
              f"{max(paired):.2f}×, median {statistics.median(paired):.2f}× (goal ≤ 2.5× for each)")
        print(f"concurrency, against the best lone session at the start: worst {max(ratios):.2f}×, median "
              f"{statistics.median(ratios):.2f}×")
        print(f"memory: after round 1 {mem[0]:.0f} MB, after round {len(mem)} {mem[-1]:.0f} MB, growth "
              f"{mem[-1] - mem[0]:+.0f} MB (goal ≤ 300 MB)")
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
    return 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=20_000)
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--sessions", type=int, default=4)
    a = ap.parse_args(argv)
    return asyncio.run(main_async(a))


if __name__ == "__main__":
    raise SystemExit(main())
