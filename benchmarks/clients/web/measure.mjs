// Open three.html and babylon.html in headless Chromium (puppeteer-core drives the Debian
// chromium) for every file of a layout folder and write one result file per client.
//   node measure.mjs BASE_URL LAYOUTDIR OUTDIR
// BASE_URL serves LAYOUTDIR with this folder linked as _web/ (clients.py sets that up).
// Writes OUTDIR/three.json, OUTDIR/babylon.json and the pictures OUTDIR/three.png,
// OUTDIR/babylon.png of the default single file.
import { readFileSync, writeFileSync } from "node:fs";
import { join } from "node:path";
import puppeteer from "puppeteer-core";

const [base, layoutDir, outDir] = process.argv.slice(2);
const expected = JSON.parse(readFileSync(join(layoutDir, "expected.json"), "utf8"));
const files = Object.keys(expected.files);
const browser = await puppeteer.launch({
  executablePath: process.env.CHROMIUM || "/usr/bin/chromium",
  headless: true,
  args: ["--no-sandbox", "--use-angle=swiftshader", "--enable-unsafe-swiftshader", "--ignore-gpu-blocklist"],
});
const clients = { three: "three.js", babylon: "Babylon.js" };
for (const [page_, client] of Object.entries(clients)) {
  const out = { client, version: null, browser: await browser.version(), files: {} };
  for (const [i, file] of files.entries()) {
    const shot = file === "float/" + files[0].split("/")[1];
    const page = await browser.newPage();
    await page.setViewport({ width: 640, height: 480 });
    page.on("pageerror", (e) => console.error(client, file, String(e)));
    await page.goto(`${base}/_web/${page_}.html?file=../${file}${shot ? "&shot=1" : ""}`);
    await page.waitForFunction("window.measured !== undefined", { timeout: 300000, polling: 200 });
    const rec = await page.evaluate("window.measured");
    if (rec.version) out.version = rec.version;
    delete rec.version;
    out.files[file] = rec;
    if (shot) await page.screenshot({ path: join(outDir, `${page_}.png`) });
    await page.close();
    console.error(client, i + 1, "/", files.length, file, rec.error || "");
  }
  writeFileSync(join(outDir, `${page_}.json`), JSON.stringify(out, null, 1) + "\n");
}
await browser.close();
