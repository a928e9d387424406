// The analyst page (GET /) in a real browser: Debian's chromium, headless, driven by
// playwright-core. Run by tests/e2e/test_page.sh against a live weft serve:
//   node tests/browser/page_test.js BASE ARTIFACTS_DIR LINK_NODE LABEL_NODE
// It loads the page with every request to another origin refused (the page must work
// offline), runs a link query and a label explanation through the forms, checks the rendered
// rows against the JSON API, uses the map with mouse and keyboard, and keeps screenshots at
// 1280x800 and 390x844 in ARTIFACTS_DIR. Prints "ok   ..." / "FAIL ..." lines; exit 1 on any
// failure. CHROMIUM overrides the browser (default /usr/bin/chromium).
"use strict";

const path = require("path");
const { chromium } = require("playwright-core");

const [base, artifacts, linkNode, labelNode] = process.argv.slice(2);
const executablePath = process.env.CHROMIUM || "/usr/bin/chromium";
let failed = 0;

function check(name, cond, detail) {
  console.log((cond ? "ok   " : "FAIL ") + name + (cond || detail === undefined ? "" : ": " + detail));
  if (!cond) failed++;
}

async function apiJson(p) {
  const resp = await fetch(base + p);
  return resp.json();
}

// A fresh page that refuses every request outside the server and records what the browser
// complains about (console errors, uncaught exceptions, CSP violations).
async function openPage(browser, viewport, problems) {
  const context = await browser.newContext({ viewport, deviceScaleFactor: 1 });
  const origin = new URL(base).origin;
  await context.route("**/*", (route) => {
    const url = route.request().url();
    if (url.startsWith(origin + "/") || url.startsWith("data:")) return route.continue();
    problems.push("request outside the server: " + url);
    return route.abort();
  });
  const page = await context.newPage();
  // A JSON route answering 4xx or 5xx is the API at work (the page shows it); the browser
  // logs it as "Failed to load resource", which is no fault of the page.
  page.on("console", (m) => {
    if (m.type() === "error" && !/^Failed to load resource: the server responded with a status of/.test(m.text()))
      problems.push("console: " + m.text());
  });
  page.on("pageerror", (e) => problems.push("exception: " + e.message));
  await page.goto(base + "/", { waitUntil: "load" });
  await page.waitForSelector("body[data-ready='1']", { timeout: 30000 });
  return { context, page };
}

async function cellTexts(page, selector, column) {
  return page.$$eval(selector + " tbody tr", (rows, c) => rows.map((r) => r.cells[c].textContent.trim()), column);
}

async function wide(browser) {
  const problems = [];
  const { context, page } = await openPage(browser, { width: 1280, height: 800 }, problems);
  const live = await page.textContent("#live-line");
  const model = await apiJson("/v1/model");
  check("the live line names the live version", live.includes("Version " + model.version), live);
  const history = await page.$$("#history tbody tr");
  const snaps = await apiJson("/v1/snapshots");
  check("the history lists every version", history.length === snaps.snapshots.length, history.length + " rows");
  const health = await apiJson("/v1/health");
  const checks = await page.$$eval("#health-list li .name", (n) => n.map((e) => e.textContent));
  check("every health check is shown", JSON.stringify(checks) === JSON.stringify(health.checks.map((c) => c.name)), checks.join(","));
  const metricRows = await page.$$("#metrics-tables tbody tr");
  check("metrics beside their baselines", metricRows.length >= 4, metricRows.length + " rows");
  const mrr = await page.$$eval("#metrics-tables tbody tr", (rows) => rows.map((r) => r.cells[0].textContent + "=" + r.cells[1].textContent));
  check("the link model's test MRR is shown", mrr.some((t) => t.startsWith("MRR=")), mrr.join("; "));
  const curves = await page.$$eval("#curve-charts svg.chart path.series", (p) => p.map((e) => e.getAttribute("d").length));
  check("training curves drawn as SVG paths", curves.length >= 2 && curves.every((n) => n > 20), JSON.stringify(curves));

  // The map: its status line, legend, a name on hover, a click that picks the node.
  const status = await page.textContent("#map-status");
  check("the map says what it projected", /principal components/.test(status), status);
  const legend = await page.$$("#map-legend li");
  check("the map has a legend", legend.length >= 2, legend.length + " entries");
  await page.locator("#map-canvas").scrollIntoViewIfNeeded();
  const box = await page.locator("#map-canvas").boundingBox();
  let tip = null, at = null;
  for (let gy = 0.3; gy <= 0.7 && !tip; gy += 0.02)
    for (let gx = 0.3; gx <= 0.7 && !tip; gx += 0.02) {
      await page.mouse.move(box.x + box.width * gx, box.y + box.height * gy);
      if (await page.isVisible("#map-tip")) { tip = await page.textContent("#map-tip"); at = [gx, gy]; }
    }
  check("hovering a point shows its name", tip !== null && tip.length > 0, "no point found under the mouse");
  if (tip) {
    await page.mouse.click(box.x + box.width * at[0], box.y + box.height * at[1]);
    const picked = await page.inputValue("#lp-node");
    check("clicking a point puts it in the query forms", picked.length > 0 && tip.startsWith(picked), picked + " / " + tip);
  }
  await page.fill("#lp-node", "");
  await page.click("#zoom-in");
  await page.focus("#map-canvas");
  await page.keyboard.press("ArrowLeft");
  await page.keyboard.press("-");
  await page.keyboard.press("Enter");
  check("Enter on the focused map picks the node nearest the centre", (await page.inputValue("#lp-node")).length > 0);

  // Every control has a label.
  const unlabelled = await page.$$eval("input:not([type=hidden]), select", (es) => es.filter((e) => !e.labels || !e.labels.length).map((e) => e.id || e.name));
  check("every input and select has a label", unlabelled.length === 0, unlabelled.join(", "));

  // A link query through the form, submitted with the keyboard.
  await page.fill("#lp-node", linkNode);
  await page.fill("#lp-k", "5");
  await page.focus("#lp-node");
  await page.keyboard.press("Enter");
  await page.waitForSelector("#lp-result tbody tr", { timeout: 15000 });
  const names = await cellTexts(page, "#lp-result", 1);
  const relation = await page.inputValue("#lp-relation");   // "" for a model of one relation
  const want = await apiJson("/v1/links/predict?source=" + encodeURIComponent(linkNode) + "&k=5" +
    (relation ? "&relation=" + encodeURIComponent(relation) : ""));
  const wantNames = want.predictions.map((p) => p.target);
  check("link query: the rendered rows are the API's, in order", JSON.stringify(names) === JSON.stringify(wantNames),
    names.join(",") + " against " + wantNames.join(","));
  const scores = await cellTexts(page, "#lp-result", 2);
  check("link query: every row has a score", scores.length === 5 && scores.every((s) => isFinite(parseFloat(s))), scores.join(","));

  // A label explanation through the form.
  await page.fill("#be-node", labelNode);
  await page.fill("#be-k", "5");
  await page.click("#form-label-explain button[type=submit]");
  await page.waitForSelector("#be-result tbody tr", { timeout: 15000 });
  const terms = await cellTexts(page, "#be-result", 0);
  const expl = await apiJson("/v1/labels/explain?node=" + encodeURIComponent(labelNode) + "&k=5");
  const wantTerms = [labelNode + " (itself)"].concat(expl.neighbours.map((n) => n.node));
  check("label explanation: the neighbours are the API's, largest share first",
    JSON.stringify(terms.slice(0, wantTerms.length)) === JSON.stringify(wantTerms), terms.join(",") + " against " + wantTerms.join(","));
  check("label explanation: the last row is the sum", terms[terms.length - 1] === "sum", terms[terms.length - 1]);
  const shares = await cellTexts(page, "#be-result", 2);
  const sum = parseFloat(shares[shares.length - 1]);
  check("label explanation: the sum is the API's logit", Math.abs(sum - expl.check.logit) <= 1e-3 * Math.max(1, Math.abs(expl.check.logit)),
    sum + " against " + expl.check.logit);
  const caution = await page.textContent("#be-result .caution");
  check("label explanation carries the API's caution", caution.includes(expl.caution), caution);
  const mapCaution = await page.textContent("#map-caution");
  check("the map, which shows predicted labels, carries it too", mapCaution.includes(expl.caution), mapCaution);

  await page.screenshot({ path: path.join(artifacts, "page-1280x800.png"), fullPage: true });
  await page.evaluate(() => window.scrollTo(0, 0));
  await page.screenshot({ path: path.join(artifacts, "page-1280x800-top.png") });
  check("no console error, exception, CSP violation or outside request", problems.length === 0, problems.join(" | "));
  await context.close();
}

async function narrow(browser) {
  const problems = [];
  const { context, page } = await openPage(browser, { width: 390, height: 844 }, problems);
  const overflow = await page.evaluate(() => document.documentElement.scrollWidth - window.innerWidth);
  check("390 px wide: nothing sticks out sideways", overflow <= 1, overflow + " px too wide");
  // The keyboard alone: the first Tab reaches the skip link.
  await page.keyboard.press("Tab");
  const first = await page.evaluate(() => document.activeElement && document.activeElement.className);
  check("the first Tab stop is the skip link", first === "skip", first);
  await page.fill("#lp-node", linkNode);
  await page.click("#form-link-predict button[type=submit]");
  await page.waitForSelector("#lp-result tbody tr", { timeout: 15000 });
  await page.fill("#be-node", labelNode);
  await page.click("#form-label-explain button[type=submit]");
  await page.waitForSelector("#be-result tbody tr", { timeout: 15000 });
  const after = await page.evaluate(() => document.documentElement.scrollWidth - window.innerWidth);
  check("390 px wide with results: nothing sticks out sideways", after <= 1, after + " px too wide");
  await page.screenshot({ path: path.join(artifacts, "page-390x844.png"), fullPage: true });
  check("390 px: no console error, exception, CSP violation or outside request", problems.length === 0, problems.join(" | "));
  await context.close();
}

(async () => {
  const browser = await chromium.launch({ executablePath, headless: true, args: ["--disable-gpu"] });
  try {
    console.log("browser: " + executablePath + " " + browser.version());
    await wide(browser);
    await narrow(browser);
  } catch (e) {
    check("the browser run", false, e && e.stack ? e.stack : String(e));
  } finally {
    await browser.close();
  }
  console.log(failed ? failed + " browser checks failed" : "browser checks passed");
  process.exit(failed ? 1 : 0);
})();
