/**
 * Printing the HTML to PDF with a headless Chromium through puppeteer-core, fully offline:
 * every request from the page other than its own data: URLs and about:blank is aborted.
 */
import { existsSync, mkdtempSync, readdirSync, rmSync } from 'node:fs';
import { homedir, tmpdir } from 'node:os';
import { join } from 'node:path';
import puppeteer from 'puppeteer-core';

/** Where to look for a browser, in order (after the environment variables). */
const SYSTEM_BROWSERS = [
  '/usr/bin/chromium',
  '/usr/bin/chromium-browser',
  '/usr/bin/google-chrome',
  '/usr/bin/google-chrome-stable',
  '/snap/bin/chromium',
  '/opt/google/chrome/chrome',
  '/Applications/Google Chrome.app/Contents/MacOS/Google Chrome',
  '/Applications/Chromium.app/Contents/MacOS/Chromium',
  'C:\\Program Files\\Google\\Chrome\\Application\\chrome.exe',
  'C:\\Program Files (x86)\\Google\\Chrome\\Application\\chrome.exe',
];

/** Chrome builds that puppeteer downloaded into its cache (~/.cache/puppeteer/chrome/<build>/…). */
function puppeteerCacheBrowsers(home: string): string[] {
  const root = join(home, '.cache', 'puppeteer');
  const found: string[] = [];
  for (const product of ['chrome', 'chrome-headless-shell', 'chromium']) {
    const dir = join(root, product);
    if (!existsSync(dir)) continue;
    for (const build of readdirSync(dir).sort().reverse()) {
      for (const sub of ['chrome-linux64/chrome', 'chrome-headless-shell-linux64/chrome-headless-shell', 'chrome-linux/chrome']) {
        found.push(join(dir, build, sub));
      }
    }
  }
  return found;
}

/**
 * Finds a Chromium or Chrome executable: PUPPETEER_EXECUTABLE_PATH, CHROME_PATH, the usual system
 * paths, then puppeteer's download cache. Returns undefined when there is none.
 */
export function findBrowser(env: NodeJS.ProcessEnv = process.env, exists: (path: string) => boolean = existsSync): string | undefined {
  const fromEnv = [env.PUPPETEER_EXECUTABLE_PATH, env.CHROME_PATH].filter((p): p is string => !!p);
  const candidates = [...fromEnv, ...SYSTEM_BROWSERS, ...puppeteerCacheBrowsers(env.HOME ?? homedir())];
  return candidates.find((path) => exists(path));
}

export const INSTALL_HINT = 'install Chromium (e.g. `apt-get install chromium`) or set PUPPETEER_EXECUTABLE_PATH to a Chrome/Chromium executable';

export interface PrintResult {
  pdf: Buffer;
  /** URLs the page tried to load; all were aborted. */
  blocked: string[];
}

/** Prints `html` to PDF bytes. The page never reaches the network. */
export async function printPdf(html: string, options: { executablePath: string; paper: 'A4' | 'Letter' }): Promise<PrintResult> {
  const profile = mkdtempSync(join(tmpdir(), 'shrinkwell-chromium-'));
  const browser = await puppeteer.launch({
    executablePath: options.executablePath,
    headless: true,
    userDataDir: profile,
    args: [
      '--no-sandbox',
      '--disable-gpu',
      '--disable-background-networking',
      '--disable-component-update',
      '--no-first-run',
      '--disable-sync',
      '--disable-default-apps',
      '--disable-extensions',
      '--disable-dev-shm-usage',
      `--user-data-dir=${profile}`,
    ],
  });
  const blocked: string[] = [];
  try {
    const page = await browser.newPage();
    await page.setJavaScriptEnabled(false);
    await page.setRequestInterception(true);
    page.on('request', (request) => {
      const url = request.url();
      if (url.startsWith('data:') || url === 'about:blank') {
        void request.continue();
      } else {
        blocked.push(url);
        void request.abort('blockedbyclient');
      }
    });
    await page.setContent(html, { waitUntil: 'load', timeout: 60_000 });
    await page.evaluate('document.fonts.ready');
    const pdf = await page.pdf({
      format: options.paper,
      printBackground: true,
      preferCSSPageSize: true,
      displayHeaderFooter: false,
      tagged: true,
      timeout: 120_000,
    });
    return { pdf: Buffer.from(pdf), blocked };
  } finally {
    await browser.close();
    rmSync(profile, { recursive: true, force: true });
  }
}

/** Number of pages of a PDF written by Chromium (counts page objects). */
export function countPdfPages(pdf: Buffer): number {
  const text = pdf.toString('latin1');
  const matches = text.match(/\/Type\s*\/Page(?![a-zA-Z])/g);
  return matches ? matches.length : 0;
}
