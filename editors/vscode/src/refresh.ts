// When to ask the server again for a solution after a save. The server solves on save in the
// background and answers `costate/solution` with whatever solution it holds, so the client asks
// on a back-off schedule until the answer differs from the one on screen. Polling needs no
// agreement on an extra notification, and a slow solve only costs a few cheap requests.
//
// No `vscode` import: the schedule and the loop are tested under node with a fake clock.

/** Delays in milliseconds between attempts: quick at first (small problems solve in well under
 * a second), then every 3 s, about two minutes in all. */
export function retryDelays(totalMs = 120_000): number[] {
  const delays = [250, 500, 1000, 2000];
  let sum = delays.reduce((a, b) => a + b, 0);
  while (sum + 3000 <= totalMs) {
    delays.push(3000);
    sum += 3000;
  }
  return delays;
}

export interface PollOptions<T> {
  fetch: () => Promise<T>;
  /** True when `value` is a new answer worth showing. */
  isNew: (value: T) => boolean;
  delays: number[];
  sleep: (ms: number) => Promise<void>;
  /** Checked before each attempt; a newer save or a closed panel cancels the old poll. */
  cancelled: () => boolean;
}

export type PollResult<T> = { kind: "new"; value: T } | { kind: "unchanged" } | { kind: "cancelled" };

/** Waits, fetches, and stops at the first new answer. A failed fetch (the server restarting,
 * say) counts as no news rather than ending the poll. */
export async function pollForChange<T>(options: PollOptions<T>): Promise<PollResult<T>> {
  for (const delay of options.delays) {
    await options.sleep(delay);
    if (options.cancelled()) {
      return { kind: "cancelled" };
    }
    let value: T;
    try {
      value = await options.fetch();
    } catch {
      continue;
    }
    if (options.cancelled()) {
      return { kind: "cancelled" };
    }
    if (options.isNew(value)) {
      return { kind: "new", value };
    }
  }
  return { kind: "unchanged" };
}

/** A cheap identity of a solution document: equal text means nothing new to draw. */
export function fingerprint(doc: unknown): string {
  return doc === null || doc === undefined ? "null" : JSON.stringify(doc);
}
