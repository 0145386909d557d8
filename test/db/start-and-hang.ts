/** Starts the embedded PostgreSQL on the data directory given, says so, and waits to be killed. */
import { startEmbeddedPostgres } from '../../services/db/embedded.ts';
import { createLogger } from '../../services/db/logger.ts';

const server = await startEmbeddedPostgres({ dataDir: process.argv[2], preferredPort: 0, logger: createLogger('silent') });
process.stdout.write(`ready ${server.port}\n`);
setInterval(() => undefined, 1 << 30);
