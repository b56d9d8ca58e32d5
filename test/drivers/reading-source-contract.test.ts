// The ReadingSource contract run against the line source over a mock serial port, over TCP to a
// local server, and over a real serial port when FRINGE_TEST_SERIAL_PORT names one.
import { createServer, type AddressInfo, type Socket } from 'node:net';
import { describe, it } from 'vitest';
import { createLineSource } from '../../drivers/line-source.ts';
import { createSerialTransport, createTcpTransport } from '../../drivers/transport.ts';
import { createMockSerial, until } from './mock-serial.ts';
import { readingSourceContract } from './reading-source-contract.ts';

readingSourceContract('serial line source (MockBinding)', () => {
  const serial = createMockSerial('/dev/ROBOT');
  const source = createLineSource({ transport: () => createSerialTransport({ path: '/dev/ROBOT', binding: serial.binding }) });
  return Promise.resolve({
    source,
    send: async (text: string) => {
      await until(() => serial.opened.length > 0, 'the port to open');
      serial.last().emitData(text);
    },
  });
});

readingSourceContract('TCP line source (local server)', async () => {
  let client: Socket | undefined;
  const server = createServer((socket) => {
    client = socket;
    socket.on('error', () => undefined);
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  const { port } = server.address() as AddressInfo;
  const source = createLineSource({ transport: () => createTcpTransport({ host: '127.0.0.1', port }) });
  return {
    source,
    send: async (text) => {
      await until(() => client !== undefined, 'the connection');
      client?.write(text);
    },
    teardown: async () => {
      client?.destroy();
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
});

const hardware = process.env.FRINGE_TEST_SERIAL_PORT;
if (hardware) {
  readingSourceContract(
    `serial line source (${hardware})`,
    () => Promise.resolve({ source: createLineSource({ transport: () => createSerialTransport({ path: hardware, baudRate: Number(process.env.FRINGE_TEST_BAUD ?? 9600) }) }) }),
    10_000,
  );
} else {
  describe('ReadingSource contract: a real serial port', () => {
    it.skip('pending: set FRINGE_TEST_SERIAL_PORT (and FRINGE_TEST_BAUD) to run it against an instrument speaking fringe format', () => undefined);
  });
}
