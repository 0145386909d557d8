/** The `cansight` command's help text and the error for a wrong invocation. */
export class UsageError extends Error {}

export const USAGE = `cansight: exhaust-ring monitoring for gas turbine fleets

usage:
  cansight start [--no-demo]          database (embedded unless DATABASE_URL), migrations,
                                      ingest + worker + API in one process on HOST:PORT
  cansight api | ingest | worker      one role per process (scale-out)
  cansight migrate                    apply pending database migrations
  cansight keys create --role R [--units a,b] [--label TEXT]
                                      roles: ingest, viewer, operator, admin
  cansight keys list
  cansight keys revoke ID|PREFIX
  cansight import FILE --unit U       load a CSV or NDJSON history file
  cansight demo --scenario NAME --out FILE
                                      write a simulated scenario (NDJSON or CSV)
  cansight report --unit U --out FILE.html [--from T] [--to T] [--csv]
                                      write the pre-outage review of a unit

Configuration is read from environment variables; see README.md.
Cansight advises; the turbine's own protection and the site's procedures govern.`;
