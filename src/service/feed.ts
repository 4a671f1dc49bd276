import type { IncomingMessage, Server } from 'node:http';
import type { Duplex } from 'node:stream';
import { WebSocketServer, type WebSocket } from 'ws';
import type { Config } from '../config/schema.js';
import type { ServiceMetrics } from './metrics.js';

export const FEED_PATH = '/api/feed';

/**
 * The WebSocket status feed: a status message every interval and every supervisor decision as
 * it happens. Each message is serialized once; a client whose unsent data exceeds its buffer
 * misses messages (counted) instead of holding anything up. Client messages: {"type":"ping"}.
 */
export class StatusFeed {
  private readonly wss: WebSocketServer;
  private readonly timer: NodeJS.Timeout;

  constructor(
    server: Server,
    private readonly opts: Config['feed'],
    private readonly metrics: ServiceMetrics,
    status: () => object,
  ) {
    this.wss = new WebSocketServer({ noServer: true, maxPayload: opts.maxMessageBytes });
    server.on('upgrade', (req: IncomingMessage, socket: Duplex, head: Buffer) => this.upgrade(req, socket, head));
    this.wss.on('connection', (ws) => this.connected(ws));
    this.timer = setInterval(() => this.broadcast({ type: 'status', ...status() }), opts.intervalSeconds * 1000);
  }

  private upgrade(req: IncomingMessage, socket: Duplex, head: Buffer): void {
    const path = (req.url ?? '').split('?')[0];
    const refuse = (status: string) => {
      socket.end(`HTTP/1.1 ${status}\r\nConnection: close\r\nContent-Length: 0\r\n\r\n`);
    };
    if (path !== FEED_PATH) return refuse('404 Not Found');
    if (this.wss.clients.size >= this.opts.maxClients) return refuse('503 Service Unavailable');
    this.wss.handleUpgrade(req, socket, head, (ws) => this.wss.emit('connection', ws, req));
  }

  private connected(ws: WebSocket): void {
    this.metrics.feedClients.set(this.wss.clients.size);
    ws.on('close', () => this.metrics.feedClients.set(this.wss.clients.size));
    ws.on('error', () => ws.terminate());
    ws.on('message', (data, isBinary) => {
      let msg: unknown;
      try {
        msg = isBinary ? undefined : JSON.parse(data.toString());
      } catch {
        msg = undefined;
      }
      if (typeof msg === 'object' && msg !== null && (msg as { type?: unknown }).type === 'ping') {
        this.send(ws, JSON.stringify({ type: 'pong' }));
      } else {
        const message = msg === undefined ? 'a client message must be JSON text' : 'unknown message; allowed: {"type":"ping"}';
        this.send(ws, JSON.stringify({ type: 'error', code: 'TW_ERR_HTTP_BODY', message }));
      }
    });
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

  close(): void {
    clearInterval(this.timer);
    for (const ws of this.wss.clients) ws.terminate();
    this.wss.close();
  }
}
