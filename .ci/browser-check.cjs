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
  // Every trial's point in the charts is named on hover and linked to its figure.
  const hover = await page.evaluate(() => Array.from(document.querySelectorAll('svg g.hover a')).map((a) => ({
    href: a.getAttribute('href'), title: (a.querySelector('title') || {}).textContent || '' })));
  const named = new Set(hover.filter((h) => h.title.includes(':')).map((h) => h.title.split(':')[0]));
  const measured = await page.evaluate(() => Array.from(document.querySelectorAll('#trials tbody tr'))
    .filter((r) => r.cells[4].dataset.v !== '').map((r) => r.cells[0].textContent));
  const missing = measured.filter((t) => !named.has(t));
  if (missing.length) problems.push(`not named on hover in the charts: ${missing.join(', ')}`);
  if (hover.some((h) => !h.href || !h.href.startsWith('plots/'))) problems.push('a chart point links nowhere');
  // The switch puts the flagged trials into the group means.
  const shown = () => page.evaluate(() => Array.from(document.querySelectorAll('g.mean-all, g.mean-clean'))
    .map((g) => g.getAttribute('class') + '=' + getComputedStyle(g).display).sort().join(' '));
  const before = await shown();
  await page.click('#with-flagged');
  const after = await shown();
  if (!before.includes('mean-all=none') || !after.includes('mean-clean=none')) problems.push(`flagged switch: ${before} -> ${after}`);
  await page.click('#with-flagged');
  for (const heading of ['latchtime version', 'settings BLAKE3', 'rig file', 'Settings']) {
    const found = await page.evaluate((h) => document.body.innerText.includes(h), heading);
    if (!found) problems.push(`page lacks "${heading}"`);
  }
  let zoomed = 0;
  // Every figure the table links to must load and draw.
  for (const link of links) {
    const figure = await context.newPage();
    figure.on('requestfailed', (r) => problems.push(`failed load: ${r.url()}`));
    const response = await figure.goto(link, { waitUntil: 'load' });
    const drawn = await figure.evaluate(() => document.querySelectorAll('svg line, svg polyline, svg path').length);
    if (!response || !response.ok() || drawn < 10) problems.push(`figure not drawn: ${link}`);
    // The zoomed release panel, with its events labelled.
    const text = await figure.evaluate(() => document.documentElement.textContent);
    if (text.includes('Release close-up') && text.includes('time from latch release, ms') && text.includes('motion peak')) zoomed += 1;
    if (link.endsWith('ls2-mid-01.svg')) {
      await figure.setViewportSize({ width: 960, height: 1304 });
      await figure.screenshot({ path: png.replace(/\.png$/, '-figure.png'), timeout: 60000 });
    }
    await figure.close();
  }
  await browser.close();
  if (zoomed < links.length / 2) problems.push(`zoomed release panel in only ${zoomed} of ${links.length} figures`);
  if (text < 200 || charts < 3 || rows < 1) problems.push(`page looks blank: ${text} characters, ${charts} charts, ${rows} rows`);
  if (problems.length) {
    console.error(problems.join('\n'));
    process.exit(1);
  }
  console.log(`browser check: ${rows} trial rows, ${charts} charts, ${links.length} figures (${zoomed} with the release close-up), ${named.size} trials named on hover, ${text} characters; screenshot ${png}`);
  console.log("browser: 1 passed, 0 failed");
})().catch((e) => { console.error(e); process.exit(1); });
