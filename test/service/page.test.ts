import { mkdirSync } from 'node:fs';
import { join } from 'node:path';
import { chromium, type Browser } from 'playwright-core';
import { afterAll, afterEach, beforeAll, describe, expect, it } from 'vitest';
import { freePort } from '../helpers/ports.js';
import { serveWith, stopAll } from '../helpers/serve.js';
import { tmpDir, tool } from '../helpers/tools.js';

// The live page (GET /) in Debian's chromium driven by playwright-core: it loads with no console
// error and nothing from elsewhere, fills from the live feed (the demo's two measurement
// channels, one shown at a time), plots the taps, reconnects after the service restarts on the
// same port, and the operator buttons act with the token, the mark capturing an episode. The
// screenshot is kept in test-artifacts/live.png.

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
    const yaml =
      `http:\n  port: ${port}\ninput:\n  desiredChannels: [1, 2]\nsupervisor:\n  windowSeconds: 0.25\nfeed:\n  intervalSeconds: 0.25\n` +
      `capture:\n  dir: ${join(dir, 'captures')}\n  secondsBefore: 0.5\n  secondsAfter: 0.25\n  triggers: [mark]\n`;
    const s1 = await serveWith(dir, yaml, { TAPWARDEN_CONTROL_TOKEN: TOKEN });
    const page = await browser.newPage({ viewport: { width: 1200, height: 1000 } });
    const errors: string[] = [];
    let outside = 0;
    page.on('console', (m) => m.type() === 'error' && !/WebSocket/.test(m.text()) && errors.push(m.text()));
    page.on('pageerror', (e) => errors.push(String(e)));
    page.on('request', (r) => !r.url().startsWith(s1.base) && !r.url().startsWith(s1.base.replace('http', 'ws')) && outside++);
    await page.goto(s1.base + '/');
    await page.waitForFunction(() => Number(document.getElementById('received')!.textContent) >= 4, null, { timeout: 30_000 });
    // The page knows its channels once its first GET /api/status answers (it may come after the feed's first windows).
    await page.waitForFunction(() => document.querySelectorAll('#channel option').length === 2, null, { timeout: 10_000 });
    expect(await page.locator('#link').textContent()).toBe('connected');
    expect(await page.locator('#decisions tr').count()).toBeGreaterThan(0);
    expect(await page.evaluate(() => (window as any).tapwardenLive.plots.length)).toBe(4);
    expect(await page.locator('#channel option').allTextContents()).toEqual(['channel 1', 'channel 2']);
    // The taps plot holds both paths' 64 taps of the channel shown.
    await page.waitForFunction(() => (window as any).tapwardenLive.plots[3].data[0].length === 64, null, { timeout: 10_000 });
    // Switching to channel 2 shows its own windows.
    await page.selectOption('#channel', '2');
    await page.waitForFunction(() => document.querySelectorAll('#decisions tr').length > 0);
    // Read in one evaluation, so that no new window lands between the two reads.
    const [shownCancellation, ch2] = await page.evaluate(() => {
      const live = (window as any).tapwardenLive;
      return [live.plots[0].data[2].at(-1), live.channels.get(2).cC.at(-1)];
    });
    expect(shownCancellation).toBe(ch2);
    // Hovering the cancellation plot names a window's outcome.
    const box = (await page.locator('#plot-cancel .u-over').boundingBox())!;
    await page.mouse.move(box.x + box.width * 0.9, box.y + box.height / 2);
    await page.waitForFunction(() => /^\d+\.\d s: (accepted|pending|idle|rejected)/.test(document.getElementById('hover')!.textContent ?? ''));
    // The buttons need the token; with it, a forced handoff is done.
    expect(await page.locator('#do-handoff').isDisabled()).toBe(true);
    await page.fill('#token', TOKEN);
    await page.click('#do-handoff');
    await page.waitForFunction(() => /^done: channel 2, clean version \d+/.test(document.getElementById('control-result')!.textContent ?? ''));
    await page.fill('#note', 'specimen rattle heard');
    await page.click('#do-mark');
    await page.waitForFunction(() => /^capture-.*-mark-ch1-2\.wav \(mark\)$/.test(document.getElementById('last-capture')!.textContent ?? ''), null, { timeout: 10_000 });
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
