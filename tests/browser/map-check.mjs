// Checks an HTML map of `ringmain map` in a real headless Chromium (Debian's package).
//
//   node map-check.mjs MAP.html ELEMENT_ID EXPECTED_TEXT SCREENSHOT.png
//
// Loads the page from the file, takes a screenshot and checks it: not blank, the legend drawn,
// colours at both ends of the scale on the map; then moves the mouse over ELEMENT_ID and reads the
// tooltip, which must contain the id and EXPECTED_TEXT. Exits 1 with a message on any failure.
// With RINGMAIN_MAP_TIMING=1 it also prints how long one full redraw takes.

import { chromium } from "playwright-core";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { inflateSync } from "node:zlib";

const [mapFile, elementId, expected, shotFile] = process.argv.slice(2);
if (!shotFile) {
  console.error("usage: node map-check.mjs MAP.html ELEMENT_ID EXPECTED_TEXT SCREENSHOT.png");
  process.exit(2);
}

function fail(message) {
  console.error(`map check FAILED: ${message}`);
  process.exitCode = 1;
  throw new Error(message);
}

// A minimal PNG reader for Chromium's screenshots: 8-bit RGB or RGBA, not interlaced.
function readPng(buffer) {
  let pos = 8;
  let width = 0, height = 0, channels = 0;
  const data = [];
  while (pos < buffer.length) {
    const length = buffer.readUInt32BE(pos);
    const type = buffer.toString("ascii", pos + 4, pos + 8);
    const body = buffer.subarray(pos + 8, pos + 8 + length);
    if (type === "IHDR") {
      width = body.readUInt32BE(0);
      height = body.readUInt32BE(4);
      const depth = body[8], colour = body[9], interlace = body[12];
      if (depth !== 8 || interlace !== 0 || (colour !== 2 && colour !== 6)) fail(`unexpected PNG format ${depth}/${colour}/${interlace}`);
      channels = colour === 6 ? 4 : 3;
    } else if (type === "IDAT") {
      data.push(body);
    }
    pos += 12 + length;
  }
  const raw = inflateSync(Buffer.concat(data));
  const stride = width * channels;
  const pixels = Buffer.alloc(height * stride);
  for (let y = 0; y < height; y++) {
    const filter = raw[y * (stride + 1)];
    const line = raw.subarray(y * (stride + 1) + 1, (y + 1) * (stride + 1));
    for (let x = 0; x < stride; x++) {
      const a = x >= channels ? pixels[y * stride + x - channels] : 0;
      const b = y > 0 ? pixels[(y - 1) * stride + x] : 0;
      const c = x >= channels && y > 0 ? pixels[(y - 1) * stride + x - channels] : 0;
      let v = line[x];
      if (filter === 1) v += a;
      else if (filter === 2) v += b;
      else if (filter === 3) v += (a + b) >> 1;
      else if (filter === 4) {
        const p = a + b - c, pa = Math.abs(p - a), pb = Math.abs(p - b), pc = Math.abs(p - c);
        v += pa <= pb && pa <= pc ? a : pb <= pc ? b : c;
      }
      pixels[y * stride + x] = v & 255;
    }
  }
  return { width, height, channels, pixels };
}

function hexRgb(hex) {
  return [1, 3, 5].map(i => parseInt(hex.slice(i, i + 2), 16));
}

const profile = mkdtempSync(join(tmpdir(), "ringmain-chromium-"));
let context;
try {
  context = await chromium.launchPersistentContext(profile, {
    executablePath: "/usr/bin/chromium",
    headless: true,
    viewport: { width: 1200, height: 800 },
    args: [
      "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
      "--disable-background-networking", "--disable-component-update", "--disable-sync",
    ],
  });
  const page = context.pages()[0] || (await context.newPage());
  const requests = [];
  page.on("request", r => { if (!r.url().startsWith("file:")) requests.push(r.url()); });
  const errors = [];
  page.on("pageerror", e => errors.push(String(e)));
  await page.goto("file://" + resolve(mapFile));
  await page.waitForFunction(() => window.ringmainMap !== undefined, null, { timeout: 30000 });
  if (errors.length) fail(`script errors: ${errors.join("; ")}`);
  if (requests.length) fail(`the page fetched ${requests.join(", ")}`);

  // The screenshot.
  const png = await page.screenshot({ path: shotFile });
  const img = readPng(png);
  const legend = await page.locator("#legend").boundingBox();
  if (!legend || legend.width < 50 || legend.height < 30) fail("no legend on the page");
  const label = await page.locator("#label").textContent();
  if (!label || !label.includes("(")) fail(`the legend has no quantity with its unit: ${label}`);
  const ramp = await page.evaluate(() => JSON.parse(document.getElementById("data").textContent).ramp);
  const at = (x, y) => {
    const i = (Math.round(y) * img.width + Math.round(x)) * img.channels;
    return [img.pixels[i], img.pixels[i + 1], img.pixels[i + 2]];
  };
  const near = (p, q, tol) => Math.abs(p[0] - q[0]) + Math.abs(p[1] - q[1]) + Math.abs(p[2] - q[2]) <= tol;
  let nonWhite = 0;
  const colours = new Set();
  let lowOnMap = 0, highOnMap = 0;
  const low = hexRgb(ramp[4]), high = hexRgb(ramp[252]);
  for (let y = 0; y < img.height; y++) {
    for (let x = 0; x < img.width; x++) {
      const p = at(x, y);
      if (p[0] < 245 || p[1] < 245 || p[2] < 245) nonWhite++;
      colours.add((p[0] >> 3) * 1024 + (p[1] >> 3) * 32 + (p[2] >> 3));
      const inLegend = x >= legend.x && x <= legend.x + legend.width && y >= legend.y && y <= legend.y + legend.height;
      if (!inLegend) {
        if (near(p, low, 24)) lowOnMap++;
        if (near(p, high, 24)) highOnMap++;
      }
    }
  }
  const share = nonWhite / (img.width * img.height);
  if (share < 0.005) fail(`the screenshot is blank (${(share * 100).toFixed(3)} % drawn)`);
  if (colours.size < 8) fail(`the screenshot has only ${colours.size} colours`);
  // The legend's colour bar shows both ends of the scale.
  const bar = await page.locator("#ramp").boundingBox();
  const left = at(bar.x + 3, bar.y + bar.height / 2), right = at(bar.x + bar.width - 3, bar.y + bar.height / 2);
  if (!near(left, hexRgb(ramp[0]), 30)) fail(`the colour bar does not start at the low end: ${left}`);
  if (!near(right, hexRgb(ramp[255]), 30)) fail(`the colour bar does not end at the high end: ${right}`);
  // The map itself uses both ends of the scale.
  if (lowOnMap < 3 || highOnMap < 3) fail(`the map does not span the scale (low ${lowOnMap} px, high ${highOnMap} px)`);

  // The tooltip of a known element, by moving the mouse over it.
  const position = await page.evaluate(id => window.ringmainMap.screenPosition(id), elementId);
  if (!position) fail(`element ${elementId} is not on the page`);
  await page.mouse.move(position[0], position[1]);
  await page.waitForSelector("#tooltip", { state: "visible", timeout: 5000 });
  const tip = await page.locator("#tooltip").textContent();
  if (!tip.includes(elementId) || !tip.includes(expected)) fail(`tooltip of ${elementId} reads ${JSON.stringify(tip)}`);

  // Pan and zoom redraw without errors.
  await page.mouse.wheel(0, -400);
  await page.mouse.down();
  await page.mouse.move(position[0] + 80, position[1] + 40);
  await page.mouse.up();
  await page.waitForTimeout(100);
  if (errors.length) fail(`script errors after pan and zoom: ${errors.join("; ")}`);
  if (process.env.RINGMAIN_MAP_TIMING === "1") {
    const ms = await page.evaluate(() => window.ringmainMap.redraw());
    const n = await page.evaluate(() => window.ringmainMap.elements);
    console.log(`map redraw: ${ms.toFixed(1)} ms for ${n} elements`);
  }
  console.log(`map check passed: ${(share * 100).toFixed(1)} % drawn, ${colours.size} colours, tooltip ${JSON.stringify(tip.split("\n")[0])}`);
} catch (e) {
  if (!process.exitCode) {
    console.error(`map check FAILED: ${e.message}`);
    process.exitCode = 1;
  }
} finally {
  if (context) await context.close();
  rmSync(profile, { recursive: true, force: true });
}
