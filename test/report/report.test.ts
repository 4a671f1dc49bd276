import { mkdirSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { chromium, type Browser } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { decimate } from '../../src/report/decimate.js';
import { cli, tmpDir, tool } from '../helpers/tools.js';

// The report in a real browser: Debian's chromium, driven by playwright-core (never a browser
// downloaded by a tool). The screenshot is kept in test-artifacts/.

const ARTIFACTS = new URL('../../test-artifacts/', import.meta.url).pathname;

describe('min/max decimation for display', () => {
  it('keeps every extreme and the time order, never cuts', () => {
    const t = Array.from({ length: 10_000 }, (_, i) => i);
    const y = t.map((i) => (i === 7777 ? 50 : i === 1234 ? -50 : Math.sin(i / 100)));
    const d = decimate(t, [y], 100);
    expect(d.t).toHaveLength(200);
    expect(d.t[0]).toBe(0);
    expect(d.t.at(-1)).toBe(9999);
    expect(Math.max(...(d.ys[0] as number[]))).toBe(50);
    expect(Math.min(...(d.ys[0] as number[]))).toBe(-50);
    for (let i = 1; i < d.t.length; i++) expect(d.t[i]!).toBeGreaterThanOrEqual(d.t[i - 1]!);
    expect(decimate([1, 2, 3], [[4, 5, 6]], 100)).toEqual({ t: [1, 2, 3], ys: [[4, 5, 6]] });
  });
});

describe('report.html in headless Chromium', () => {
  let browser: Browser;
  const dir = tmpDir();
  beforeAll(async () => {
    tool('chromium', ['--version']);
    cli(['demo', '--out', dir]);
    writeFileSync(join(dir, 'cautious.yaml'), 'supervisor:\n  passesRequired: 4\n  marginDb: 2\n');
    const r = cli(['replay', join(dir, 'bench-trial.wav'), '--policy', join(dir, 'bench-trial.yaml'), '--policy', join(dir, 'cautious.yaml'), '--out', join(dir, 'out')]);
    expect(r.status).toBe(0);
    browser = await chromium.launch({
      executablePath: '/usr/bin/chromium',
      args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking', '--disable-component-update', '--no-first-run'],
    });
  });
  afterAll(async () => {
    await browser?.close();
  });

  it('is self-contained: no script or style loaded from elsewhere (the browser test also counts requests)', () => {
    const html = readFileSync(join(dir, 'out', 'report.html'), 'utf8');
    expect(/<script[^>]+src=|<link[^>]+href=|@import/.test(html)).toBe(false);
  });

  it('opens offline with no console errors, draws every plot, and shows the failed criteria on hover', async () => {
    const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
    const errors: string[] = [];
    page.on('console', (m) => m.type() === 'error' && errors.push(m.text()));
    page.on('pageerror', (e) => errors.push(String(e)));
    let requests = 0;
    page.on('request', (r) => !r.url().startsWith('file:') && requests++);
    await page.goto('file://' + join(dir, 'out', 'report.html'));
    await page.waitForFunction(() => (window as any).tapwardenPlots?.length > 0);
    // Per policy: error power, cancellation, weights, taps; once: the spectrum.
    const plots = await page.evaluate(() =>
      (window as any).tapwardenPlots.map((p: any) => {
        const c: HTMLCanvasElement = p.plot.ctx.canvas;
        const px = p.plot.ctx.getImageData(0, 0, c.width, c.height).data;
        let inked = 0;
        for (let i = 3; i < px.length; i += 4) if (px[i] > 0) inked++;
        return { title: p.title, inked };
      }),
    );
    expect(plots.map((p: { title: string }) => p.title)).toEqual([
      'Reference power spectral density',
      ...Array(2).fill(['Error power by path', 'Cancellation by path', 'Weight mean and max |w|', 'Final taps']).flat(),
    ]);
    for (const p of plots) expect(p.inked, p.title).toBeGreaterThan(2000);
    // The connector glitch at 31 s: hover the refused handoff on the first cancellation plot.
    const box = await page.evaluate(() => {
      const p = (window as any).tapwardenPlots[2].plot;
      const ev = p.over.getBoundingClientRect();
      p.over.scrollIntoView({ block: 'center' });
      const r = p.over.getBoundingClientRect();
      return { x: r.left + p.valToPos(31.5, 'x'), y: r.top + r.height / 2, w: ev.width };
    });
    await page.mouse.move(box.x, box.y);
    const tip = await page.locator('#tip').textContent();
    expect(tip).toMatch(/handoff refused at 31\.5 s; failed: cancellation/);
    mkdirSync(ARTIFACTS, { recursive: true });
    await page.screenshot({ path: join(ARTIFACTS, 'report.png'), fullPage: true });
    expect(errors).toEqual([]);
    expect(requests).toBe(0);
  });
});

describe('the analyze report in headless Chromium', () => {
  let browser: Browser;
  const dir = tmpDir();
  beforeAll(async () => {
    cli(['demo', '--out', dir]);
    const r = cli(['analyze', join(dir, 'bench-trial.wav'), '--out', join(dir, 'a')]);
    expect(r.status).toBe(0);
    browser = await chromium.launch({
      executablePath: '/usr/bin/chromium',
      args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-background-networking', '--disable-component-update', '--no-first-run'],
    });
  });
  afterAll(async () => {
    await browser?.close();
  });

  it('states the recording, shows no policy table, labels small eigenvalues, draws the threshold and lists the leak candidates', async () => {
    const page = await browser.newPage({ viewport: { width: 1280, height: 900 } });
    const errors: string[] = [];
    page.on('console', (m) => m.type() === 'error' && errors.push(m.text()));
    page.on('pageerror', (e) => errors.push(String(e)));
    try {
      await page.goto('file://' + join(dir, 'a', 'report.html'));
      await page.waitForFunction(() => (window as any).tapwardenPlots?.length > 0);
      expect(await page.locator('#meta').textContent()).toMatch(/^40\.0 s at 16000 Hz; tapwarden /);
      expect(await page.locator('h2', { hasText: 'Policies' }).count()).toBe(0);
      const eigen = await page.evaluate(() => {
        const p = (window as any).tapwardenPlots.find((x: any) => x.title === 'Eigenvalues of R').plot;
        return { ticks: p.axes[1].values(p, [1e-9, 1e-5, 1e-3, 0.1]), series: p.series.map((s: any) => s.label) };
      });
      expect(eigen.ticks).toEqual(['1e-9', '1e-5', '1e-3', '1e-1']);
      expect(eigen.series).toContain('threshold (-60 dB)');
      const rows = await page.locator('#analysis h3:has-text("Leak candidates") + table tr').count();
      expect(rows).toBe(11); // a header and ten candidates
      expect(await page.locator('tr.suggested').count()).toBe(1);
      mkdirSync(ARTIFACTS, { recursive: true });
      await page.screenshot({ path: join(ARTIFACTS, 'analysis.png'), fullPage: true });
      expect(errors).toEqual([]);
    } finally {
      await page.close();
    }
  });
});
