// Loads tidemark's tracks into igv.js (the embeddable genome browser of igv.org, from the npm
// registry) in Debian's chromium and prints, as JSON, what igv.js reads at one locus: the
// features of the bgzip + tabix BED and of the GFF3, and the values of the bigWig.
//
//   node read_tracks.mjs FOLDER CHROM START END
//
// FOLDER holds calls.bed.gz (+ .tbi), calls.gff3, post.bw and sizes.txt; it is served on
// 127.0.0.1 with HTTP range requests (igv.js reads indexed files by range), together with
// igv.js itself and an empty page. Nothing else is fetched: igv.js asks igv.org for its table
// of moved URLs before every load (there is no option to turn that off), which is answered
// here with an empty table; any other request is aborted and reported.
import http from "node:http";
import fs from "node:fs";
import os from "node:os";
import path from "node:path";
import { fileURLToPath } from "node:url";
import { chromium } from "playwright-core";

const [folder, chrom, startText, endText] = process.argv.slice(2);
const start = Number(startText), end = Number(endText);
const here = path.dirname(fileURLToPath(import.meta.url));
const modules = process.env.TIDEMARK_NODE_MODULES || path.join(here, "node_modules");
const igvScript = path.join(modules, "igv", "dist", "igv.min.js");

const page_html = "<!DOCTYPE html><html><head><meta charset=\"utf-8\"><script src=\"/igv.min.js\"></script>" +
  "</head><body><div id=\"igv\" style=\"width:1000px\"></div></body></html>";

const served = [];
const server = http.createServer((req, res) => {
  const name = decodeURIComponent(new URL(req.url, "http://127.0.0.1").pathname).slice(1);
  served.push(name);
  if (name === "" || name === "index.html") {
    res.writeHead(200, { "Content-Type": "text/html" });
    res.end(page_html);
    return;
  }
  const file = name === "igv.min.js" ? igvScript : path.join(folder, path.basename(name));
  if (!fs.existsSync(file)) {
    res.writeHead(404);
    res.end();
    return;
  }
  const size = fs.statSync(file).size;
  const range = /^bytes=(\d+)-(\d*)$/.exec(req.headers.range || "");
  const headers = { "Accept-Ranges": "bytes", "Access-Control-Allow-Origin": "*" };
  if (range) {
    const from = Number(range[1]);
    const to = Math.min(range[2] ? Number(range[2]) : size - 1, size - 1);
    if (from >= size) {
      res.writeHead(416, { ...headers, "Content-Range": `bytes */${size}` });
      res.end();
      return;
    }
    res.writeHead(206, { ...headers, "Content-Range": `bytes ${from}-${to}/${size}`,
                         "Content-Length": to - from + 1 });
    fs.createReadStream(file, { start: from, end: to }).pipe(res);
  } else {
    res.writeHead(200, { ...headers, "Content-Length": size });
    fs.createReadStream(file).pipe(res);
  }
});
await new Promise((resolve) => server.listen(0, "127.0.0.1", resolve));
const base = `http://127.0.0.1:${server.address().port}`;

const profile = fs.mkdtempSync(path.join(os.tmpdir(), "tidemark-chromium-"));
// An empty profile folder (playwright passes it as --user-data-dir).
const browser = await chromium.launchPersistentContext(profile, {
  executablePath: "/usr/bin/chromium",
  headless: true,
  args: ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"],
});
let result;
try {
  const page = await browser.newPage();
  const blocked = [];
  await page.route("**/*", (route) => {
    const url = route.request().url();
    if (url.startsWith(base + "/")) return route.continue();
    if (url === "https://igv.org/data/url_mappings.tsv")
      return route.fulfill({ status: 200, contentType: "text/plain", body: "", headers: { "Access-Control-Allow-Origin": "*" } });
    blocked.push(url);
    return route.abort();
  });
  const errors = [];
  page.on("pageerror", (e) => errors.push(String(e)));
  await page.goto(base + "/");
  result = await page.evaluate(async ({ chrom, start, end }) => {
    const div = document.getElementById("igv");
    const b = await igv.createBrowser(div, {
      reference: { id: "tidemark-demo", name: "tidemark demo", fastaURL: "/ref.fa", indexURL: "/ref.fa.fai" },
      locus: `${chrom}:${start + 1}-${end}`,
      tracks: [],
      showCenterGuide: false,
      loadDefaultGenomes: false,
    });
    const bed = await b.loadTrack({ name: "calls", url: "/calls.bed.gz", indexURL: "/calls.bed.gz.tbi",
                                    format: "bed", type: "annotation" });
    const gff = await b.loadTrack({ name: "gff3", url: "/calls.gff3", format: "gff3", type: "annotation" });
    const wig = await b.loadTrack({ name: "posterior", url: "/post.bw", format: "bigwig", type: "wig" });
    const plain = (f) => ({
      chr: f.chr, start: f.start, end: f.end, name: f.name ?? null, score: f.score ?? null,
      strand: f.strand ?? null, type: f.type ?? null,
      thickStart: f.cdStart ?? f.thickStart ?? null, thickEnd: f.cdEnd ?? f.thickEnd ?? null,
      color: f.color ?? null,
      id: typeof f.getAttributeValue === "function" ? (f.getAttributeValue("ID") ?? null) : null,
    });
    const bedFeatures = (await bed.getFeatures(chrom, start, end)).map(plain);
    const gffFeatures = (await gff.getFeatures(chrom, start, end)).map(plain);
    // bpPerPixel 1: the base-level data, not a zoom level.
    const values = (await wig.getFeatures(chrom, start, end, 1)).map((f) => ({ start: f.start, end: f.end, value: f.value }));
    return { bed: bedFeatures, gff3: gffFeatures, bigwig: values,
             tracks: b.trackViews.map((v) => v.track.name) };
  }, { chrom, start, end });
  result.blocked = blocked;
  result.page_errors = errors;
  result.served = [...new Set(served)].sort();
} finally {
  await browser.close();
  server.close();
  fs.rmSync(profile, { recursive: true, force: true });
}
process.stdout.write(JSON.stringify(result) + "\n");
