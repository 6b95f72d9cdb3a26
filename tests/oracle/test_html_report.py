"""scan --html checked from outside: the page is rendered by a real browser (Debian chromium,
headless screenshot and DOM dump) and the picture is checked for content with PIL (Debian
python3-pil); html5lib's strict parser (Debian python3-html5lib, the WHATWG parsing algorithm)
and HTML Tidy (Debian tidy) validate it; where the calls are drawn is compared with the BED;
record names, profile texts and file names full of markup must come out as text, with no
script anywhere."""

import gzip
import json
import os
import re
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET

sys.dont_write_bytecode = True
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import tmtest  # noqa: E402

REPO = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
DEMO = os.path.join(REPO, "data", "demo", "demo.fa.gz")
SVG = "{http://www.w3.org/2000/svg}"
XHTML = "{http://www.w3.org/1999/xhtml}"
# tidemark's palette, first entry (README: itemRgb of browser BED); cpg_island is region 0.
ISLAND_RGB = (0, 110, 120)


def chromium(args, work):
    exe = shutil.which("chromium")
    if not exe:
        raise RuntimeError("chromium is not installed (scripts/install-deps.sh installs it)")
    cmd = [exe, "--headless=new", "--no-sandbox", "--disable-gpu", "--hide-scrollbars", "--no-first-run",
           f"--user-data-dir={os.path.join(work, 'chromium-profile')}"] + args
    return subprocess.run(cmd, capture_output=True, text=True, timeout=180)


def parse_strict(path):
    import html5lib
    with open(path, "rb") as f:
        return html5lib.HTMLParser(strict=True, namespaceHTMLElements=True).parse(f)


def text_of(tree):
    return "".join(tree.itertext())


def section(tree, ident):
    return next(el for el in tree.iter(XHTML + "section") if el.get("id") == ident)


def path_span(d):
    """The x extent of an SVG path of M/V/H commands (what the report draws)."""
    xs = [float(v) for v in re.findall(r"[MH](-?[\d.]+)", d)]
    return min(xs), max(xs)


def listed_calls(tree):
    """(sequence, 1-based start, 1-based end) of each row of the page's table of all calls."""
    rows = []
    for tr in section(tree, "list").find(".//" + XHTML + "div[@class='scroll']").iter(XHTML + "tr"):
        cells = ["".join(td.itertext()) for td in tr.iter(XHTML + "td")]
        if cells:
            title = tr.find(XHTML + "td[2]").get("title")
            rows.append((title or cells[1], int(cells[2].replace(",", "")), int(cells[3].replace(",", ""))))
    return rows


def body(checks, tm, work):
    records = tmtest.read_fasta(DEMO)
    lengths = {n: len(s) for n, s in records}

    # 1. The demo run; the same bytes for 1 and 2 threads, also when the contigs are decoded in
    #    segments (--block 4096: 64-Ki segments, so the demo contigs split).
    #    The recorded command omits -t, so runs in two folders write the same page.
    for threads in ("1", "2"):
        tmtest.run_in(tm, os.path.join(work, "t" + threads), ["scan", DEMO, "-q", "-o", "calls.bed", "--html",
                                                               "report.html", "-t", threads])
        tmtest.run_in(tm, os.path.join(work, "s" + threads), ["scan", DEMO, "-q", "-o", "calls.bed", "--block", "4096",
                                                               "--html", "report.html", "-t", threads])
    for a, b, what in (("t1", "t2", "the report is byte-identical for -t 1 and -t 2"),
                       ("s1", "s2", "with contigs decoded in segments (--block 4096), the report is byte-identical "
                                    "for -t 1 and -t 2")):
        checks.check(tmtest.read_bytes(os.path.join(work, a, "report.html")) ==
                     tmtest.read_bytes(os.path.join(work, b, "report.html")), what, "byte comparison")
    tmtest.run(tm, ["scan", DEMO, "-q", "-o", "calls.bed", "--html", "report.html"], cwd=work)
    page = tmtest.read_bytes(os.path.join(work, "report.html"))

    # 2. Valid HTML: html5lib in strict mode raises on any parse error; tidy reports none.
    try:
        tree = parse_strict(os.path.join(work, "report.html"))
        checks.check(True, "html5lib strict parsing finds no error", "html5lib 1.1 (WHATWG parser)")
    except Exception as e:  # html5lib.html5parser.ParseError
        checks.check(False, "html5lib strict parsing finds no error", "html5lib 1.1 (WHATWG parser)", str(e))
        tree = None
    tidy = subprocess.run(["tidy", "-q", "-e", "--show-warnings", "yes", os.path.join(work, "report.html")],
                          capture_output=True, text=True)
    checks.check(tidy.returncode == 0, "HTML Tidy reports no error or warning", "HTML Tidy 5.6",
                 tidy.stderr.strip()[:400])

    # 3. Self-contained: no script, no external resource, nothing fetched.
    text = page.decode("utf-8")
    checks.check(not re.search(r"<\s*(script|link|img|iframe|object|embed)\b", text, re.I),
                 "no script, link, img, iframe, object or embed element", "HTML elements that load or run content")
    urls = set(re.findall(r"https?://[^\s\"'<>)]+", text))
    checks.check(urls <= {"http://www.w3.org/2000/svg"}, "no URL other than the SVG namespace", "page text", str(urls))
    if tree is not None:
        attrs = [a for el in tree.iter() for a in el.attrib if a.lower().startswith("on") or a in ("src", "href")]
        checks.equal(attrs, [], "no event-handler, src or href attribute", "html5lib DOM")
        svgs = list(tree.iter(SVG + "svg"))
        checks.check(len(svgs) >= 4, "inline SVG figures: along-sequence, two histograms, call windows",
                     "html5lib DOM", f"{len(svgs)} svg elements")
        tables = list(tree.iter(XHTML + "table"))
        checks.check(len(tables) >= 4, "tables: run, region types, genome-wide (2), sequences", "html5lib DOM",
                     f"{len(tables)} tables")

    # 4. Contents against the FASTA and the BED, independently of the report's own numbers.
    calls = [r for r in tmtest.read_bed(os.path.join(work, "calls.bed"))]
    body_text = text_of(tree) if tree is not None else ""
    for name, n in lengths.items():
        checks.check(name in body_text and f"{n:,}" in body_text, f"{name} and its length {n:,} are shown",
                     "FASTA lengths counted in Python")
    checks.check(f"{len(calls)} calls" in body_text, f"the header counts the BED's {len(calls)} calls", "calls.bed")
    if tree is not None:
        # Along-sequence figure: every BED call lies under a drawn call mark of its row, and every
        # mark covers a call. Rows are <g> with a <title> naming the sequence; the bar (class seq)
        # spans the sequence, so its width gives the scale.
        along = next(s for s in tree.iter(SVG + "svg") if "along each sequence" in s.get("aria-label", ""))
        rows = {}
        for g in along.iter(SVG + "g"):
            title = g.find(SVG + "title").text
            name = title.split(":")[0]
            bar = next(r for r in g.iter(SVG + "rect") if r.get("class") == "seq")
            marks = [(float(r.get("x")), float(r.get("x")) + float(r.get("width")))
                     for r in g.iter(SVG + "rect") if r.get("fill") == "rgb(0,110,120)"]
            rows[name] = (float(bar.get("x")), float(bar.get("width")), marks)
        checks.equal(sorted(rows), sorted(lengths), "one row per sequence", "FASTA record names")
        longest = max(lengths.values())
        for name, (x0, width, marks) in rows.items():
            scale = width / lengths[name]
            checks.check(abs(scale - 860 / longest) < 1e-3, f"{name} is drawn to the common scale", "FASTA lengths")
            mine = [(int(c[1]), int(c[2])) for c in calls if c[0] == name]
            under = all(any(a - 0.2 <= x0 + (s + e) / 2 * scale <= b + 0.2 for a, b in marks) for s, e in mine)
            covers = all(any(a - 0.2 <= x0 + e * scale and x0 + s * scale <= b + 0.2 for s, e in mine) for a, b in marks)
            checks.check(under and covers and len(marks) > 0, f"{name}: call marks match the {len(mine)} BED calls",
                         "calls.bed", f"{len(marks)} marks")
        # Windows of the most confident calls: the first is a BED call with the highest mean posterior.
        titles = [t.text for s in tree.iter(SVG + "svg") if "posterior around call" in s.get("aria-label", "")
                  for t in s.iter(SVG + "text") if t.get("class") == "ttl"]
        best = max(float(c[6]) for c in calls)
        m = re.match(r"1\. (\S+):([\d,]+)\u2013([\d,]+)", titles[0] if titles else "")
        top = [c for c in calls if m and c[0] == m.group(1) and int(c[1]) == int(m.group(2).replace(",", "")) - 1
               and int(c[2]) == int(m.group(3).replace(",", ""))]
        checks.check(top and float(top[0][6]) >= best - 1e-4, "window 1 shows a call with the highest mean posterior",
                     "calls.bed column 7", titles[0] if titles else "no window")
        checks.equal(len(titles), min(6, len(calls)), "one window per top call (at most 6)", "calls.bed")

    # 5. A real browser renders it: the screenshot has many colours, the island colour among them.
    shot = os.path.join(work, "report.png")
    out = chromium([f"--screenshot={shot}", "--window-size=1200,2600", "file://" + os.path.join(work, "report.html")], work)
    from PIL import Image
    if checks.check(os.path.exists(shot), "chromium writes a screenshot", "chromium headless",
                    "" if os.path.exists(shot) else out.stderr[-300:]):
        img = Image.open(shot).convert("RGB")
        pixels = list(img.getdata())
        colours = {}
        for p in pixels:
            colours[p] = colours.get(p, 0) + 1
        non_white = sum(n for c, n in colours.items() if c != (255, 255, 255)) / len(pixels)
        checks.check(len(colours) >= 50, "the screenshot has many distinct colours (text, figures)", "PIL",
                     f"{len(colours)} colours")
        checks.check(non_white >= 0.05, "at least 5 % of the screenshot is not white", "PIL", f"{non_white:.3f}")
        island = sum(n for c, n in colours.items() if all(abs(a - b) <= 6 for a, b in zip(c, ISLAND_RGB)))
        checks.check(island >= 300, "the cpg_island colour (0,110,120) fills at least 300 pixels", "PIL",
                     f"{island} pixels")

    # 6. A fragmented assembly: 230 sequences, the 200 longest are drawn and listed, longest first.
    lengths = [1000 + (i * 97) % 230 * 20 for i in range(230)]  # distinct: 97 is prime to 230
    tmtest.run(tm, ["simulate", "--lengths", ",".join(map(str, lengths)), "--seed", "3", "-o", "frag.fa"], cwd=work)
    tmtest.run(tm, ["scan", "frag.fa", "-q", "-o", "/dev/null", "--html", "frag.html"], cwd=work)
    ftree = parse_strict(os.path.join(work, "frag.html"))
    along = next(s for s in ftree.iter(SVG + "svg") if "along each sequence" in s.get("aria-label", ""))
    drawn = [g.find(SVG + "title").text.split(":")[0] for g in along.iter(SVG + "g")]
    longest = sorted(range(230), key=lambda i: -lengths[i])[:200]
    checks.equal(drawn, [f"sim{i + 1}" for i in longest], "the 200 longest of 230 sequences are drawn, "
                 "longest first", "lengths given to simulate")
    checks.check("The 200 longest of 230 sequences" in text_of(ftree), "the page says how many are shown",
                 "page text")
    n50 = next(n for n in sorted(lengths, reverse=True)
               if 2 * sum(x for x in lengths if x >= n) >= sum(lengths))
    checks.check(f"{n50:,}" in text_of(section(ftree, "genome")), f"the genome table gives the N50, {n50:,} bp",
                 "N50 computed here from the lengths given to simulate")
    rows = [tr for tr in section(ftree, "sequences").iter(XHTML + "tr")
            if any(td.text and td.text.startswith("sim") for td in tr.iter(XHTML + "td"))]
    checks.equal(len(rows), 200, "the sequences table lists the same 200", "page DOM")

    # 7. A simulated 3-Mbp genome with gaps and 20 or more calls: every call of the BED is in the
    #    page's table, in position order (start + 1: positions on the page are 1-based).
    tmtest.run(tm, ["simulate", "--lengths", "2000000,1000000", "--seed", "4", "--gaps", "0.05", "--gap-length",
                    "15000", "-o", "sim3.fa"], cwd=work)
    tmtest.run(tm, ["scan", "sim3.fa", "-q", "-o", "sim3.bed", "--html", "sim3.html"], cwd=work)
    sim_calls = [(c[0], int(c[1]) + 1, int(c[2])) for c in tmtest.read_bed(os.path.join(work, "sim3.bed"))]
    checks.check(len(sim_calls) >= 20, f"the simulated genome has 20 or more calls ({len(sim_calls)})", "sim3.bed")
    stree = parse_strict(os.path.join(work, "sim3.html"))
    checks.equal(listed_calls(stree), sim_calls, "every call is listed with its coordinates, in position order",
                 "sim3.bed (BED start + 1)")
    checks.check(f"All {len(sim_calls)} calls in position order" in text_of(stree),
                 "the table says it lists all calls", "page text")

    # With more than ten calls, the ten longest are ranked above the list: the BED's ten longest
    # (ties: any order of equal lengths is accepted).
    box = next(div for div in section(stree, "list").iter(XHTML + "div")
               if any((h.text or "").startswith("The 10 longest") for h in div.findall(XHTML + "h3")))
    table = box.find(XHTML + "table")
    ranked = [int("".join(tr.findall(XHTML + "td")[4].itertext()).replace(",", ""))
              for tr in table.iter(XHTML + "tr") if tr.findall(XHTML + "td")]
    checks.equal(ranked, sorted((e - s + 1 for _, s, e in sim_calls), reverse=True)[:10],
                 "the ten longest calls are ranked by length", "sim3.bed")

    # Nothing is drawn inside assembly gaps: along each sequence, no posterior area reaches into
    # the interior of an N run of the FASTA of at least 10 kb. The figure's 2-kb bins are drawn in
    # pairs here (each drawn bin at least a pixel: 860 px for 2 Mbp), and a drawn bin that is
    # more than half unknown is left empty, so only 4 kb at either end of a run may be drawn.
    along = next(s for s in stree.iter(SVG + "svg") if "along each sequence" in s.get("aria-label", ""))
    sim_seqs = dict(tmtest.read_fasta(os.path.join(work, "sim3.fa")))
    longest_sim = max(len(q) for q in sim_seqs.values())
    inside, gaps = [], 0
    for g in along.iter(SVG + "g"):
        name = g.find(SVG + "title").text.split(":")[0]
        x0 = float(next(r for r in g.iter(SVG + "rect") if r.get("class") == "seq").get("x"))
        scale = 860 / longest_sim
        spans = [path_span(p.get("d")) for p in g.iter(SVG + "path")]
        mask = tmtest.long_unknown_runs(sim_seqs[name], 10000)
        edges = [i for i in range(1, len(mask)) if mask[i] != mask[i - 1]]
        runs = list(zip(([0] if mask[0] else []) + [e for e in edges if mask[e]],
                        [e for e in edges if not mask[e]] + ([len(mask)] if mask[-1] else [])))
        for b, e in runs:
            lo, hi = x0 + (b + 4000) * scale, x0 + (e - 4000) * scale
            inside += [(name, b, e) for a, z in spans if a < hi and z > lo]
        gaps += len(runs)
    checks.check(gaps >= 3, f"the simulated genome has {gaps} gaps of at least 10 kb", "sim3.fa")
    checks.equal(inside, [], "no posterior area is drawn over a gap of the FASTA", "sim3.fa N runs")

    # The calling line states the minimums that act, for a per-base and a window profile: from the
    #    profile JSON (calling.merge_gap, calling.min_length, regions[].min_length, window.size).
    for name in ("cpg-island", "isochore", "gc-shift"):
        prof = json.loads(tmtest.run(tm, ["profiles", "show", name]))
        window = (prof.get("window") or {}).get("size", 0)
        shortest = max(prof["calling"]["min_length"],
                       *[(-(-r.get("min_length", 1) // window) * window if window else r.get("min_length", 1))
                         for r in prof["regions"] if r["report"]])
        gap = prof["calling"]["merge_gap"]
        scanned = name
        if prof.pop("template", False):  # scan refuses a template: its classes as a plain profile
            scanned = os.path.join(work, f"{name}-model.json")
            with open(scanned, "w") as f:
                json.dump(prof, f)
        tmtest.run(tm, ["scan", "sim3.fa", "-q", "-p", scanned, "-o", "/dev/null", "--html", f"{name}.html"], cwd=work)
        ptree = parse_strict(os.path.join(work, f"{name}.html"))
        line = next("".join(tr.find(XHTML + "td").itertext()) for tr in section(ptree, "run").iter(XHTML + "tr")
                    if tr.find(XHTML + "th") is not None and tr.find(XHTML + "th").text == "calling")
        checks.check(f"calls \u2265 {shortest:,} bp" in line and
                     (f"runs fewer than {gap:,} bp apart merged" if gap > 1 else "runs not merged") in line and
                     (not window or f"whole {window:,}-bp windows" in line),
                     f"{name}: the calling line gives calls \u2265 {shortest:,} bp, the merge gap {gap} and the window "
                     f"{window}", "the profile JSON (tidemark profiles show)", line)

    # 8. The CpG-depletion warning of stderr is on the page, in the box at the top: DNA without
    #    CpG depletion (drawn from the gc-shift profile, CpG o/e about 1).
    tmtest.run(tm, ["simulate", "-p", "gc-shift", "--lengths", "200000", "--seed", "2", "-o", "flat.fa"], cwd=work)
    proc = subprocess.run([tm, "scan", "flat.fa", "-o", "/dev/null", "--html", "flat.html"], cwd=work,
                          capture_output=True, text=True, check=True)
    warnings = [line[len("tidemark: warning: "):] for line in proc.stderr.splitlines()
                if line.startswith("tidemark: warning: ")]
    checks.check(any("CpG o/e" in w for w in warnings), "the run warns of CpG not being depleted", "stderr")
    wtree = parse_strict(os.path.join(work, "flat.html"))
    box = section(wtree, "warnings")
    checks.equal(["".join(li.itertext()) for li in box.iter(XHTML + "li")], warnings,
                 "the page's warning box holds every warning of stderr", "stderr of the same run")
    first = next(el for el in wtree.iter(XHTML + "section"))
    checks.check(first is box, "the warning box is the page's first section", "html5lib DOM")
    checks.check("warnings" not in [el.get("id") for el in tree.iter(XHTML + "section")] if tree is not None else True,
                 "a run without warnings has no warning box", "demo run: no warning on stderr")

    # Many warnings (one per empty record): stderr folds them after the first 5 into one count line
    #    (README: repeated warnings), and the box lists exactly what stderr shows, the count line
    #    included. (The box's own cap of 100 is checked in tests/report_html.cpp.)
    with open(os.path.join(work, "empties.fa"), "w") as f:
        f.write("".join(f">empty{i}\n" for i in range(120)) + ">real\n" + records[0][1][:20000] + "\n")
    proc = subprocess.run([tm, "scan", "empties.fa", "-o", "/dev/null", "--html", "empties.html"], cwd=work,
                          capture_output=True, text=True, check=True)
    stderr_warnings = [line for line in proc.stderr.splitlines() if line.startswith("tidemark: warning: ")]
    etree_ = parse_strict(os.path.join(work, "empties.html"))
    box = section(etree_, "warnings")
    items = ["".join(li.itertext()) for li in box.iter(XHTML + "li")]
    checks.check(len(stderr_warnings) == 6 and "115 more empty records (120 in all" in stderr_warnings[-1]
                 and items == [w[len("tidemark: warning: "):] for w in stderr_warnings],
                 "120 empty records: 5 warnings and a count line, on stderr and in the box alike",
                 "stderr of the same run", f"{len(stderr_warnings)} on stderr, {len(items)} listed")

    # 9. Not with --shard: a usage error (exit 2), and no file.
    proc = subprocess.run([tm, "scan", DEMO, "--shard", "1/2", "-o", "/dev/null", "--html", "shard.html"], cwd=work,
                          capture_output=True, text=True)
    checks.check(proc.returncode == 2 and "--html" in proc.stderr and not os.path.exists(os.path.join(work, "shard.html")),
                 "--html with --shard is a usage error naming --html", "README exit codes", proc.stderr.strip())

    # 10. Markup in the inputs comes out as text and runs nothing.
    evil_name = "<script>alert(1)</script>"
    evil_file = os.path.join(work, "a&b'<i>.fa")
    seq = records[0][1][80000:100000]
    tmtest.write_fasta(evil_file, [(evil_name, seq), ("plain&<b>bold</b>", records[1][1][10000:50000])])
    profile = json.loads(tmtest.run(tm, ["profiles", "show", "cpg-island"]))
    profile["description"] = 'quote " amp & lt < gt > <script>alert(2)</script>'
    profile["regions"][0]["description"] = "<img src=x onerror=alert(3)>"
    profile["name"] = 'name<b>&"x"</b>'
    for st in profile["states"]:  # a region name with markup (the unreported one)
        if st["region"] == "background":
            st["region"] = "back<u>ground</u>&"
    profile["regions"][1]["name"] = "back<u>ground</u>&"
    with open(os.path.join(work, "evil.json"), "w") as f:
        json.dump(profile, f)
    tmtest.run(tm, ["scan", evil_file, "-q", "-p", "evil.json", "-o", "/dev/null", "--html", "evil.html"], cwd=work)
    raw = tmtest.read_bytes(os.path.join(work, "evil.html")).decode("utf-8")
    injected = ["<img src=x", "name<b>", "back<u>", "plain&<b>", "<i>.fa"]
    checks.check(not re.search(r"<\s*script", raw, re.I) and not any(x in raw for x in injected),
                 "no markup from the inputs reaches the page unescaped", "page text")
    try:
        etree = parse_strict(os.path.join(work, "evil.html"))
        etext = text_of(etree)
        checks.check(True, "the report of hostile inputs parses strictly", "html5lib 1.1")
        checks.equal(len(list(etree.iter(XHTML + "script"))) + len(list(etree.iter(SVG + "script"))), 0,
                     "no script element in the DOM", "html5lib DOM")
        for s in (evil_name, "plain&<b>bold</b>", profile["description"], profile["regions"][0]["description"],
                  "a&b'<i>.fa", profile["name"], profile["regions"][1]["name"]):
            checks.check(s in etext, f"{s!r} is shown as text", "html5lib DOM text")
    except Exception as e:
        checks.check(False, "the report of hostile inputs parses strictly", "html5lib 1.1", str(e))
    dom = chromium(["--dump-dom", "file://" + os.path.join(work, "evil.html")], work)
    checks.check(dom.returncode == 0 and "<script" not in dom.stdout.lower() and "&lt;script&gt;alert(1)" in dom.stdout,
                 "chromium's DOM after loading holds the record name as text and no script element",
                 "chromium headless --dump-dom")


tmtest.main("scan --html rendered and validated by independent tools", body)
