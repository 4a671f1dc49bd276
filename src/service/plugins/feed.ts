import type { IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import type { FastifyInstance } from 'fastify';
import { WebSocketServer, type WebSocket } from 'ws';
import type { Config } from '../../config/schema.js';
import type { DecisionRecord, RunEvent } from '../../run/record.js';
import type { RunSink } from '../../run/run.js';
import type { ServiceMetrics } from '../metrics.js';

export const FEED_PATH = '/api/feed';
/** Client messages a feed client may send per second, and the burst it may save up. */
export const FEED_CLIENT_RATE = 20;
const FEED_CLIENT_BURST = 40;
/** A client refused this many messages in a row is closed (1008, policy violation). */
const FEED_FLOOD_CLOSE = 1000;

interface Client {
  tokens: number;
  last: number;
  refusedInARow: number;
}

/**
 * The WebSocket status feed, a sink of the run: every decision record and event as it happens,
 * and a status message once per feed.intervalSeconds of stream time. Each message is serialized
 * once; a client whose unsent data exceeds its buffer misses messages (counted) instead of
 * holding anything up. Client messages ({"type":"ping"}) are rate-limited per client; what is
 * refused is counted.
 */
export class StatusFeed implements RunSink {
  private readonly wss: WebSocketServer;
  private readonly clients = new Map<WebSocket, Client>();

  constructor(
    private readonly opts: Config['feed'],
    private readonly metrics: ServiceMetrics,
    private readonly status: () => object,
  ) {
    this.wss = new WebSocketServer({ noServer: true, maxPayload: opts.maxMessageBytes });
    this.wss.on('connection', (ws) => this.connected(ws));
  }

  /** The fastify plugin: takes WebSocket upgrades on /api/feed. */
  readonly plugin = async (app: FastifyInstance): Promise<void> => {
    app.server.on('upgrade', (req: IncomingMessage, socket: Duplex, head: Buffer) => this.upgrade(req, socket, head));
  };

  private upgrade(req: IncomingMessage, socket: Duplex, head: Buffer): void {
    const path = (req.url ?? '').split('?')[0];
    const refuse = (status: string) => socket.end(`HTTP/1.1 ${status}\r\nConnection: close\r\nContent-Length: 0\r\n\r\n`);
    if (path !== FEED_PATH) return void refuse('404 Not Found');
    if (this.wss.clients.size >= this.opts.maxClients) {
      this.metrics.feedRefusedConnections.inc();
      return void refuse('503 Service Unavailable');
    }
    this.wss.handleUpgrade(req, socket, head, (ws) => this.wss.emit('connection', ws, req));
  }

  private connected(ws: WebSocket): void {
    this.clients.set(ws, { tokens: FEED_CLIENT_BURST, last: performance.now(), refusedInARow: 0 });
    this.metrics.feedClients.set(this.wss.clients.size);
    ws.on('close', () => {
      this.clients.delete(ws);
      this.metrics.feedClients.set(this.wss.clients.size);
    });
    ws.on('error', (err: Error & { code?: string }) => {
      // A message over feed.maxMessageBytes: ws closes with 1009 (RFC 6455 7.4.1, message too big).
      if (err.code === 'WS_ERR_UNSUPPORTED_MESSAGE_LENGTH') this.metrics.feedRefused.labels('size').inc();
      ws.terminate();
    });
    ws.on('message', (data, isBinary) => this.message(ws, data as Buffer, isBinary));
  }

  private message(ws: WebSocket, data: Buffer, isBinary: boolean): void {
    const c = this.clients.get(ws);
    if (c === undefined) return;
    const now = performance.now();
    c.tokens = Math.min(FEED_CLIENT_BURST, c.tokens + ((now - c.last) / 1000) * FEED_CLIENT_RATE);
    c.last = now;
    if (c.tokens < 1) {
      this.metrics.feedRefused.labels('rate').inc();
      if (++c.refusedInARow >= FEED_FLOOD_CLOSE) ws.close(1008, 'too many messages');
      return;
    }
    c.tokens -= 1;
    c.refusedInARow = 0;
    let msg: unknown;
    try {
      msg = isBinary ? undefined : JSON.parse(data.toString());
    } catch {
      msg = undefined;
    }
    if (typeof msg === 'object' && msg !== null && (msg as { type?: unknown }).type === 'ping') {
      this.send(ws, JSON.stringify({ type: 'pong' }));
      return;
    }
    this.metrics.feedRefused.labels('invalid').inc();
    const message = msg === undefined ? 'a client message must be JSON text' : 'unknown message; allowed: {"type":"ping"}';
    this.send(ws, JSON.stringify({ type: 'error', code: 'TW_ERR_HTTP_BODY', message }));
  }

  private send(ws: WebSocket, text: string): void {
    if (ws.readyState !== ws.OPEN) return;
    if (ws.bufferedAmount + text.length > this.opts.clientBufferBytes) {
      this.metrics.feedDropped.inc();
      return;
    }
    ws.send(text);
  }

  broadcast(message: object): void {
    if (this.wss.clients.size === 0) return;
    const text = JSON.stringify(message);
    for (const ws of this.wss.clients) this.send(ws, text);
  }

  onRecord(r: DecisionRecord): void {
    this.broadcast(r);
  }

  onEvent(e: RunEvent): void {
    this.broadcast(e);
  }

  /** The status message due at this stream time. */
  tick(streamSeconds: number): void {
    if (this.wss.clients.size > 0) this.broadcast({ type: 'status', streamSeconds, ...this.status() });
  }

  close(): void {
    for (const ws of this.wss.clients) ws.terminate();
    this.wss.close();
  }
}
