"""The Lua script that applies keys' shares of a batch atomically inside Redis.

It is assembled from the handlers the state classes declare, one function per opcode,
so each kind's update arithmetic is written once and runs the same on a real server
and on the embedded store (fakeredis runs Lua 5.1, as Redis does).

Call: ``KEYS`` the hashes; for each key in turn ``ARGV`` holds its expiry (epoch
milliseconds), the count of operation arguments that follow, then the operations, each
an opcode and its arguments. Per key the script reads the touched fields with one
HMGET, applies every operation in order in Lua, writes the changed fields with one
HSET and moves the expiry later if needed: a handful of Redis calls per key, however
many events the batch holds for it.
"""

from __future__ import annotations

import hashlib

from windvane.kinds import state_classes
from windvane.kinds.base import LuaHandler

_DRIVER = """
local i = 1
for ki = 1, #KEYS do
  local k = KEYS[ki]
  local at = tonumber(ARGV[i])
  local stop = i + 2 + tonumber(ARGV[i + 1])
  i = i + 2
  local fields, seen, j = {}, {}, i
  while j < stop do
    local n = N[ARGV[j]]
    if not n then return redis.error_reply('windvane: unknown opcode ' .. tostring(ARGV[j])) end
    local f = ARGV[j + 1]
    if not seen[f] then seen[f] = true; fields[#fields + 1] = f end
    j = j + 1 + n
  end
  S, D, order = {}, {}, {}
  if #fields > 0 then
    local values = redis.call('HMGET', k, unpack(fields))
    for x = 1, #fields do S[fields[x]] = values[x] end
  end
  j = i
  while j < stop do
    local op = ARGV[j]
    H[op](ARGV, j + 1)
    j = j + 1 + N[op]
  end
  if #order > 0 then
    local flat = {}
    for x = 1, #order do
      flat[2 * x - 1] = order[x]
      flat[2 * x] = S[order[x]]
    end
    redis.call('HSET', k, unpack(flat))
    local current = redis.call('PEXPIRETIME', k)
    if current < 0 or current < at then redis.call('PEXPIREAT', k, at) end
  end
  i = stop
end
return #KEYS
"""


def build_update_script() -> str:
    handlers: dict[str, LuaHandler] = {}
    for state in state_classes():
        for opcode, handler in state.LUA_HANDLERS.items():
            if opcode in handlers and handlers[opcode] != handler:
                raise RuntimeError(f"two state classes declare Lua opcode {opcode!r}")
            handlers[opcode] = handler
    parts = [
        "local S, D, order = {}, {}, {}",
        "local function put(f, x)",
        "  S[f] = x",
        "  if not D[f] then D[f] = true; order[#order + 1] = f end",
        "end",
        "local H, N = {}, {}",
    ]
    for opcode in sorted(handlers):
        handler = handlers[opcode]
        parts.append(f"N[{opcode!r}] = {handler.arity}")
        parts.append(f"H[{opcode!r}] = function(a, i)\n{handler.body.strip()}\nend")
    parts.append(_DRIVER.strip())
    return "\n".join(parts) + "\n"


UPDATE_SCRIPT = build_update_script()
UPDATE_SCRIPT_SHA = hashlib.sha1(UPDATE_SCRIPT.encode()).hexdigest()
