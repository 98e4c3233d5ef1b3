// The refresh-after-save loop, driven by a fake clock: it stops at the first new answer, keeps
// going through failed requests, gives up after the schedule, and stops when cancelled.

import { test } from "node:test";
import * as assert from "node:assert/strict";
import { fingerprint, pollForChange, retryDelays } from "../refresh";

function fakeClock() {
  const slept: number[] = [];
  return { slept, sleep: async (ms: number) => void slept.push(ms) };
}

test("the schedule starts quickly and lasts about two minutes", () => {
  const delays = retryDelays();
  assert.deepEqual(delays.slice(0, 4), [250, 500, 1000, 2000]);
  const total = delays.reduce((a, b) => a + b, 0);
  assert.ok(total <= 120_000 && total > 115_000, `total ${total}`);
  assert.ok(delays.every((d) => d <= 3000));
});

test("stops at the first new answer", async () => {
  const clock = fakeClock();
  const answers = [null, "old", "new", "newer"];
  let calls = 0;
  const result = await pollForChange<string | null>({
    fetch: async () => answers[calls++],
    isNew: (v) => v !== null && v !== "old",
    delays: [1, 2, 3, 4, 5],
    sleep: clock.sleep,
    cancelled: () => false,
  });
  assert.deepEqual(result, { kind: "new", value: "new" });
  assert.equal(calls, 3);
  assert.deepEqual(clock.slept, [1, 2, 3]);
});

test("a failing request is retried, and the schedule ends unchanged", async () => {
  const clock = fakeClock();
  let calls = 0;
  const result = await pollForChange<string>({
    fetch: async () => {
      calls++;
      if (calls === 1) throw new Error("server restarting");
      return "old";
    },
    isNew: (v) => v !== "old",
    delays: [1, 1, 1],
    sleep: clock.sleep,
    cancelled: () => false,
  });
  assert.deepEqual(result, { kind: "unchanged" });
  assert.equal(calls, 3);
});

test("a newer save cancels the poll before and after a request", async () => {
  let generation = 0;
  const mine = generation;
  let calls = 0;
  const before = await pollForChange<string>({
    fetch: async () => (calls++, "new"),
    isNew: () => true,
    delays: [1],
    sleep: async () => void generation++,
    cancelled: () => generation !== mine,
  });
  assert.deepEqual(before, { kind: "cancelled" });
  assert.equal(calls, 0);

  let flag = false;
  const after = await pollForChange<string>({
    fetch: async () => ((flag = true), "new"),
    isNew: () => true,
    delays: [1],
    sleep: async () => {},
    cancelled: () => flag,
  });
  assert.deepEqual(after, { kind: "cancelled" }, "an answer that arrives after cancellation is dropped");
});

test("fingerprints tell documents apart and treat null and undefined alike", () => {
  assert.equal(fingerprint(null), fingerprint(undefined));
  assert.notEqual(fingerprint({ cost: 1 }), fingerprint({ cost: 2 }));
  assert.equal(fingerprint({ cost: 1 }), fingerprint({ cost: 1 }));
});
