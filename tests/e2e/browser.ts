/** Headless Chromium for page tests (Debian's /usr/bin/chromium through playwright-core), with a fresh profile each launch. */
import { mkdtempSync, rmSync } from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { chromium, type BrowserContext, type Page } from 'playwright-core';

export const CHROMIUM_ARGS = [
  '--headless',
  '--no-sandbox',
  '--disable-gpu',
  '--disable-quic',
  '--no-first-run',
  '--disable-background-networking',
  '--disable-component-update',
  '--disable-sync',
];

export async function launchBrowser(): Promise<{ context: BrowserContext; close: () => Promise<void> }> {
  const userDataDir = mkdtempSync(path.join(os.tmpdir(), 'radcast-chromium-'));
  const context = await chromium.launchPersistentContext(userDataDir, {
    executablePath: '/usr/bin/chromium',
    headless: true,
    args: CHROMIUM_ARGS,
    viewport: { width: 1200, height: 900 },
  });
  return {
    context,
    close: async () => {
      await context.close();
      rmSync(userDataDir, { recursive: true, force: true });
    },
  };
}

/**
 * Opens a report file and waits until its charts are drawn (the page sets window.radcastChartsDrawn).
 * Collects page errors, console errors and warnings, and every request that is not for a file.
 */
export async function openReport(context: BrowserContext, file: string): Promise<{ page: Page; errors: string[]; requests: string[] }> {
  const page = await context.newPage();
  const errors: string[] = [];
  const requests: string[] = [];
  page.on('pageerror', (e) => errors.push(e.message));
  page.on('console', (m) => {
    if (m.type() === 'error' || m.type() === 'warning') errors.push(m.text());
  });
  page.on('request', (r) => {
    if (!r.url().startsWith('file:')) requests.push(r.url());
  });
  await page.goto(`file://${file}`);
  await page.waitForFunction(() => typeof (window as unknown as { radcastChartsDrawn?: number }).radcastChartsDrawn === 'number');
  return { page, errors, requests };
}

/** Charts drawn by the page and, per canvas, its id and the share of pixels with any ink (a blank canvas has 0). */
export async function canvasInk(page: Page): Promise<{ drawn: number; canvases: Array<{ id: string; share: number }> }> {
  return page.evaluate(() => ({
    drawn: (window as unknown as { radcastChartsDrawn: number }).radcastChartsDrawn,
    canvases: [...document.querySelectorAll('canvas')].map((c) => {
      const px = c.getContext('2d')!.getImageData(0, 0, c.width, c.height).data;
      let n = 0;
      for (let i = 3; i < px.length; i += 4) if (px[i] > 0) n++;
      return { id: c.id, share: n / (c.width * c.height) };
    }),
  }));
}
