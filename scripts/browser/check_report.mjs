// Opens ratepool HTML reports in headless Chromium (Debian's, through
// playwright-core), takes a screenshot of each plot, and fails when an
// expected plot is missing or empty, or the page logs a console error.
//
// usage: node check_report.mjs SCREENSHOT_FOLDER REPORT.html [REPORT.html ...]
import { chromium } from "playwright-core";
import { mkdirSync } from "node:fs";
import { basename, resolve } from "node:path";

const EXPECTED = ["shrinkage", "funnel", "prior", "calibration", "pool-weights"];
const STAR_EXPECTED = ["shrinkage", "calibration", "pool-weights"];
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
  // A map: every area of the map drawn once per panel, each panel's areas with
  // different keys, and a legend with the scale's classes.
  const maps = await page.$$eval("figure.plot svg[data-areas]", (svgs) => svgs.map((svg) => ({
    name: svg.closest("figure").dataset.plot,
    areas: Number(svg.dataset.areas),
    panels: [...svg.querySelectorAll("g.panel")].map((g) => {
      const keys = [...g.querySelectorAll("path.area")].map((p) => p.dataset.key);
      return { drawn: keys.length, distinct: new Set(keys).size };
    }),
    legend: svg.querySelectorAll("g.legend rect").length,
  })));
  for (const map of maps) {
    for (const panel of map.panels) {
      if (panel.drawn !== map.areas || panel.distinct !== map.areas) {
        fail(`${report}: map ${map.name} draws ${panel.drawn} areas (${panel.distinct} distinct) of ${map.areas}`);
      }
    }
    if (map.panels.length === 0 || map.legend < 3) fail(`${report}: map ${map.name} has no panel or no legend`);
    console.log(`${report}: ${map.name}: ${map.panels.length} panels of ${map.areas} areas each, ${map.legend} legend swatches`);
  }
  // A star-rating page (its levels table) has no funnel and no prior density.
  const stars = (await page.$("table#levels")) !== null;
  const expectedPlots = stars ? STAR_EXPECTED
    : plots.some((p) => p.name === "centres") ? EXPECTED.filter((e) => e !== "prior") : EXPECTED;
  for (const expected of expectedPlots) {
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
