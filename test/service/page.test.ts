import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import { chromium, type Browser } from 'playwright-core';
import { afterAll, afterEach, beforeAll, describe, expect, it } from 'vitest';
import { freePort } from '../helpers/ports.js';
import { serveWith, stopAll } from '../helpers/serve.js';
import { tmpDir, tool } from '../helpers/tools.js';

// The live page (GET /) in Debian's chromium driven by playwright-core: it loads with no console
// error and nothing from elsewhere, fills from the live feed, reconnects after the service
// restarts on the same port, and the operator buttons act with the token. The screenshot is kept
// in test-artifacts/live.png.

const ARTIFACTS = new URL('../../test-artifacts/', import.meta.url).pathname;
const TOKEN = 'bench-7-control-token-0123456789';
let browser: Browser;

beforeAll(async () => {
  tool('chromium', ['--version']);
  browser = await chromium.launch({
    executablePath: '/usr/bin/chromium',
    args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking', '--no-first-run'],
  });
});
afterAll(async () => {
  await browser?.close();
});
afterEach(stopAll);

describe('the live page', () => {
  it('fills from the feed, reconnects after a restart, and the buttons act', async () => {
    const dir = tmpDir();
    const port = await freePort();
    const yaml = `http:\n  port: ${port}\nsupervisor:\n  windowSeconds: 0.25\nfeed:\n  intervalSeconds: 0.25\n`;
    const s1 = await serveWith(dir, yaml, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    const page = await browser.newPage({ viewport: { width: 1200, height: 1000 } });
    const errors: string[] = [];
    let outside = 0;
    page.on('console', (m) => m.type() === 'error' && !/WebSocket/.test(m.text()) && errors.push(m.text()));
    page.on('pageerror', (e) => errors.push(String(e)));
    page.on('request', (r) => !r.url().startsWith(s1.base) && !r.url().startsWith(s1.base.replace('http', 'ws')) && outside++);
    await page.goto(s1.base + '/');
    await page.waitForFunction(() => Number(document.getElementById('received')!.textContent) >= 4, null, { timeout: 30_000 });
    expect(await page.locator('#link').textContent()).toBe('connected');
    expect(await page.locator('#decisions tr').count()).toBeGreaterThan(0);
    expect(await page.evaluate(() => (window as any).tapwardenLive.plots.length)).toBe(3);
    // The buttons need the token; with it, a forced handoff is done.
    expect(await page.locator('#do-handoff').isDisabled()).toBe(true);
    await page.fill('#token', TOKEN);
    await page.click('#do-handoff');
    await page.waitForFunction(() => /^done: clean version \d+/.test(document.getElementById('control-result')!.textContent ?? ''));
    mkdirSync(ARTIFACTS, { recursive: true });
    await page.screenshot({ path: join(ARTIFACTS, 'live.png'), fullPage: true });
    // The service restarts on the same port; the page reconnects and keeps filling.
    await s1.stop();
    await page.waitForFunction(() => document.getElementById('link')!.textContent === 'reconnecting', null, { timeout: 10_000 });
    const before = Number(await page.locator('#received').textContent());
    await serveWith(dir, yaml, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    await page.waitForFunction((n) => document.getElementById('link')!.textContent === 'connected' && Number(document.getElementById('received')!.textContent) > n + 2, before, { timeout: 30_000 });
    expect(errors).toEqual([]);
    expect(outside).toBe(0);
  });
});
