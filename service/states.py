"""The job state machine and the Lua scripts that change a job atomically.

Data only (state names, allowed transitions, script texts); :class:`service.store.JobStore`
runs the scripts. Kept apart so the state machine can be read on one page.
"""

from __future__ import annotations

import enum


class JobState(enum.StrEnum):
    """Job states; ``finished``, ``failed`` and ``cancelled`` are terminal."""

    QUEUED = "queued"
    RUNNING = "running"
    FINALIZING = "finalizing"
    FINISHED = "finished"
    FAILED = "failed"
    CANCELLED = "cancelled"

    @property
    def terminal(self) -> bool:
        return self in (JobState.FINISHED, JobState.FAILED, JobState.CANCELLED)


#: Allowed transitions (the state machine of DESIGN.md, plus re-opening for ``extend``).
TRANSITIONS: dict[JobState, frozenset[JobState]] = {
    JobState.QUEUED: frozenset(
        {JobState.RUNNING, JobState.FINALIZING, JobState.FAILED, JobState.CANCELLED}
    ),
    JobState.RUNNING: frozenset({JobState.FINALIZING, JobState.FAILED, JobState.CANCELLED}),
    JobState.FINALIZING: frozenset({JobState.FINISHED, JobState.FAILED, JobState.CANCELLED}),
    JobState.FINISHED: frozenset({JobState.QUEUED}),
    JobState.CANCELLED: frozenset({JobState.QUEUED, JobState.FINALIZING}),
    JobState.FAILED: frozenset({JobState.QUEUED}),
}

# KEYS[1]=job hash, KEYS[2]=events list; ARGV[1]=new state, ARGV[2]=timestamp,
# ARGV[3]=reason, ARGV[4..]=allowed current states. Returns the previous state or false.
_TRANSITION = """
local cur = redis.call('HGET', KEYS[1], 'state')
if not cur then return false end
local ok = false
for i = 4, #ARGV do if ARGV[i] == cur then ok = true end end
if not ok then return false end
redis.call('HSET', KEYS[1], 'state', ARGV[1], ARGV[1] .. '_at', ARGV[2])
if ARGV[3] ~= '' then redis.call('HSET', KEYS[1], 'reason', ARGV[3]) end
redis.call('RPUSH', KEYS[2], cjson.encode({state=ARGV[1], at=tonumber(ARGV[2]),
  from=cur, reason=ARGV[3]}))
return cur
"""

# KEYS[1]=tickets; ARGV[1]=budget. Returns the ticket number or -1 when the budget is spent.
_TICKET = """
local n = tonumber(redis.call('GET', KEYS[1]) or '0')
if n >= tonumber(ARGV[1]) then return -1 end
return redis.call('INCR', KEYS[1])
"""

# KEYS[1]=trials hash, KEYS[2]=board zset, KEYS[3]=library zset, KEYS[4]=oof key,
# KEYS[5]=job hash; ARGV[1]=trial number, ARGV[2]=row json, ARGV[3]=score or '',
# ARGV[4]=oof bytes or '', ARGV[5]=library size, ARGV[6]=oof key prefix, ARGV[7]=state
_RECORD = """
local first = redis.call('HSETNX', KEYS[1], ARGV[1], ARGV[2])
if first == 0 then
  local old = cjson.decode(redis.call('HGET', KEYS[1], ARGV[1]))
  redis.call('HINCRBY', KEYS[5], 'n_' .. old['state'], -1)
  redis.call('HSET', KEYS[1], ARGV[1], ARGV[2])
end
redis.call('HINCRBY', KEYS[5], 'n_' .. ARGV[7], 1)
if ARGV[3] ~= '' then redis.call('ZADD', KEYS[2], ARGV[3], ARGV[1]) end
if ARGV[4] ~= '' and ARGV[3] ~= '' and tonumber(ARGV[5]) > 0 then
  redis.call('ZADD', KEYS[3], ARGV[3], ARGV[1])
  redis.call('SET', KEYS[4], ARGV[4])
  local n = redis.call('ZCARD', KEYS[3])
  local k = tonumber(ARGV[5])
  if n > k then
    local out = redis.call('ZRANGE', KEYS[3], 0, n - k - 1)
    for _, t in ipairs(out) do
      redis.call('DEL', ARGV[6] .. t)
      redis.call('ZREM', KEYS[3], t)
    end
  end
end
return 1
"""


# phase of a finalize in progress: written only while the job record exists (a job deleted
# meanwhile must not come back as a half record)
_PHASE = """
if redis.call('EXISTS', KEYS[1]) == 1 then
  redis.call('HSET', KEYS[1], 'phase', ARGV[1], 'phase_at', ARGV[2])
  return 1
end
return 0
"""

__all__ = ["TRANSITIONS", "JobState"]
