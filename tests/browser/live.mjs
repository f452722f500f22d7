// Live-page check in Debian's chromium, driven by playwright-core (no
// browser download). Usage: node live.mjs URL SCREENSHOT.png
//
// Protocol with the Go test that runs it (stdout lines):
//   loaded <points>   the page drew the series; the test may now add a step
//   panel <id> ...      what each canvas shows (points, series ink, words)
//   ok <before> <after>  a new point appeared without reloading the page, and
//                        every canvas not in a hidden figure is drawn with
//                        data (else: fail panels without data: ...)
import { chromium } from "playwright-core";

const [url, shot] = process.argv.slice(2);
const browser = await chromium.launch({
  executablePath: process.env.CHROMIUM || "/usr/bin/chromium",
  args: ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync"],
});
const fail = async (msg) => { console.log("fail " + msg); await browser.close(); process.exit(1); };
try {
  const page = await browser.newPage({ viewport: { width: 1400, height: 1000 } });
  // Record the text each canvas draws (legends, axis labels) since its last
  // clear: a canvas keeps pixels, not words.
  await page.addInitScript(() => {
    const P = CanvasRenderingContext2D.prototype, fill = P.fillText, clear = P.clearRect;
    P.clearRect = function (...a) { this.canvas.__texts = []; return clear.apply(this, a); };
    P.fillText = function (t, ...a) { (this.canvas.__texts ||= []).push(String(t)); return fill.call(this, t, ...a); };
  });
  const errors = [];
  page.on("pageerror", (e) => errors.push(String(e)));
  await page.goto(url, { waitUntil: "load" });
  const points = () => page.evaluate(() => Number(document.getElementById("plot-sat").dataset.points || 0));
  await page.waitForFunction(() => Number(document.getElementById("plot-sat").dataset.points || 0) >= 2, null, { timeout: 60000 });
  // Every series panel drew something.
  for (const id of ["plot-sat", "plot-awn", "plot-as", "plot-angle", "plot-ganglia", "plot-largest"]) {
    const n = await page.evaluate((id) => Number(document.getElementById(id).dataset.points || 0), id);
    if (!(n > 0)) await fail(`${id} has no points`);
  }
  // The canvas really has ink on it (not just a data attribute).
  const inked = await page.evaluate(() => {
    const c = document.getElementById("plot-sat"), d = c.getContext("2d").getImageData(0, 0, c.width, c.height).data;
    let n = 0; for (let i = 0; i < d.length; i += 4) if (d[i + 3] > 0 && (d[i] < 200 || d[i + 2] < 200)) n++;
    return n;
  });
  if (inked < 500) await fail(`saturation plot nearly empty (${inked} dark pixels)`);
  // The health line counts the node's worker process (it beats to the
  // aggregator; /api/health lists it).
  const workers = await page.waitForFunction(() => {
    const w = document.getElementById("workers-count");
    return w && Number(w.textContent) >= 1 && document.querySelectorAll("#workers li b").length >= 1;
  }, null, { timeout: 60000 }).then(() => true, () => false);
  if (!workers) await fail("health line does not count the node's worker within 60 s");
  const before = await points();
  console.log(`loaded ${before}`);
  await page.waitForFunction((b) => Number(document.getElementById("plot-sat").dataset.points || 0) > b, before, { timeout: 180000 });
  const after = await points();
  // Wait for the preview image to load (the event, not a fixed pause).
  const preview = await page.waitForFunction(() => {
    const i = document.getElementById("preview");
    return i.complete && i.naturalWidth > 0;
  }, null, { timeout: 60000 }).then(() => true, () => false);
  if (!preview) await fail("preview image did not load within 60 s");
  // Every panel shown is drawn with data: points counted by the page, ink in
  // the colours of the series inside the plot frame (below the legend
  // strip), and words: a legend or axis label, not "waiting for data…".
  const panels = await page.evaluate(() => {
    const series = ["#1d3f8f", "#d98a00", "#8c2d73", "#4aa3d8"].map(h => [1, 3, 5].map(k => parseInt(h.slice(k, k + 2), 16)));
    return [...document.querySelectorAll("canvas")].map(c => {
      const fig = c.closest("figure");
      const shown = !(fig && fig.hidden) && c.offsetParent !== null;
      const d = c.getContext("2d").getImageData(0, 0, c.width, c.height).data;
      let ink = 0;
      for (let y = 26; y < c.height - 40; y++) for (let x = 70; x < c.width - 12; x++) {
        const i = 4 * (y * c.width + x);
        if (d[i + 3] < 200) continue;
        if (series.some(s => Math.abs(d[i] - s[0]) < 40 && Math.abs(d[i + 1] - s[1]) < 40 && Math.abs(d[i + 2] - s[2]) < 40)) ink++;
      }
      const texts = c.__texts || [];
      const words = texts.filter(t => /[A-Za-zα-ωΑ-Ω_]/.test(t) && !t.startsWith("waiting"));
      return { id: c.id, shown, points: Number(c.dataset.points || 0), ink, words: words.length, waiting: texts.some(t => t.startsWith("waiting")), sample: words.slice(0, 3).join(" | ") };
    });
  });
  const empty = [];
  for (const p of panels) {
    console.log(`panel ${p.id} shown=${p.shown} points=${p.points} ink=${p.ink} words=${p.words} (${p.sample})`);
    if (!p.shown) continue;
    if (p.points <= 0 || p.ink < 12 || p.words < 2 || p.waiting) empty.push(`${p.id} (points ${p.points}, ink ${p.ink}, words ${p.words})`);
  }
  if (panels.length < 20) await fail(`only ${panels.length} canvases on the page`);
  if (empty.length) await fail("panels without data: " + empty.join(", "));
  await page.screenshot({ path: shot, fullPage: true });
  if (errors.length) await fail("page errors: " + errors.join("; "));
  console.log(`ok ${before} ${after}`);
  await browser.close();
} catch (e) {
  await fail(String(e).split("\n")[0]);
}
