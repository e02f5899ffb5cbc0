// Opens ratepool HTML reports in headless Chromium (Debian's, through
// playwright-core), takes a screenshot of each plot, and fails when an
// expected plot is missing or empty, or the page logs a console error.
//
// usage: node check_report.mjs SCREENSHOT_FOLDER REPORT.html [REPORT.html ...]
import { chromium } from "playwright-core";
import { mkdirSync } from "node:fs";
import { basename, resolve } from "node:path";

const EXPECTED = ["shrinkage", "funnel", "prior", "calibration", "pool-weights"];
const [folder, ...reports] = process.argv.slice(2);
if (!folder || reports.length === 0) {
  console.error("usage: node check_report.mjs SCREENSHOT_FOLDER REPORT.html [...]");
  process.exit(2);
}
mkdirSync(folder, { recursive: true });
const browser = await chromium.launch({
  executablePath: "/usr/bin/chromium",
  args: ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync"],
});
let failures = 0;
const fail = (message) => { console.error(`FAIL ${message}`); failures += 1; };
for (const report of reports) {
  const name = basename(report, ".html");
  const page = await browser.newPage({ viewport: { width: 1200, height: 900 } });
  const errors = [];
  page.on("console", (m) => { if (m.type() === "error") errors.push(m.text()); });
  page.on("pageerror", (e) => errors.push(String(e)));
  // Any request beyond the file itself means the page is not self-contained.
  page.on("request", (r) => { if (!r.url().startsWith("file://")) errors.push(`network request: ${r.url()}`); });
  await page.goto(`file://${resolve(report)}`, { waitUntil: "load" });
  const plots = await page.$$eval("figure.plot", (figures) => figures.map((f) => ({
    name: f.dataset.plot,
    shapes: f.querySelectorAll("svg circle, svg rect, svg polyline, svg line, svg path").length,
    width: f.querySelector("svg")?.getBoundingClientRect().width ?? 0,
    height: f.querySelector("svg")?.getBoundingClientRect().height ?? 0,
  })));
  for (const expected of EXPECTED) {
    if (!plots.some((p) => p.name === expected)) fail(`${report}: plot ${expected} is missing`);
  }
  for (const plot of plots) {
    if (plot.shapes < 10 || plot.width < 100 || plot.height < 100) {
      fail(`${report}: plot ${plot.name} is empty (${plot.shapes} shapes, ${plot.width} x ${plot.height})`);
      continue;
    }
    const element = await page.$(`figure.plot[data-plot="${plot.name}"]`);
    const file = `${folder}/${name}-${plot.name}.png`;
    await element.screenshot({ path: file });
    console.log(`${report}: ${plot.name}: ${plot.shapes} shapes, ${plot.width} x ${plot.height}, screenshot ${file}`);
  }
  await page.screenshot({ path: `${folder}/${name}-page.png`, fullPage: true });
  for (const error of errors) fail(`${report}: console: ${error}`);
  await page.close();
}
await browser.close();
if (failures > 0) {
  console.error(`${failures} failures`);
  process.exit(1);
}
console.log(`${reports.length} reports checked: every plot present and drawn, no console error`);
