"""The Lua script that applies keys' shares of a batch atomically inside Redis.

It is assembled from the handlers the state classes declare, one function per opcode,
so each kind's update arithmetic is written once and runs the same on a real server
and on the embedded store (fakeredis runs Lua 5.1, as Redis does).

Call: ``KEYS`` the hashes; for each key in turn ``ARGV`` holds its expiry (epoch
milliseconds), its watermark field (empty outside stream ingest), the number of
segments, then each segment: its stream entry id (or empty), the count of operation
arguments, and the operations, each an opcode and its arguments. Per key the script
reads the touched fields with one HMGET and decodes each once, applies in order every
segment whose entry id is above the watermark, raises the watermark, encodes and writes
the changed fields with one HSET and moves the expiry later if needed: a handful of
Redis calls per key, however many events the batch holds for it. The expiry only moves
later: ``PEXPIREAT ... GT`` extends it, and a key without one (new) gets it set.
"""

from __future__ import annotations

import hashlib

from windvane.kinds import state_classes
from windvane.kinds.base import LuaHandler

_DRIVER = """
local function after(a, b)
  -- True when stream id a (ms-seq) comes after b; a missing b comes before everything.
  if not b then return true end
  local p, q = string.find(a, '-', 1, true), string.find(b, '-', 1, true)
  local am, bm = tonumber(string.sub(a, 1, p - 1)), tonumber(string.sub(b, 1, q - 1))
  if am ~= bm then return am > bm end
  return tonumber(string.sub(a, p + 1)) > tonumber(string.sub(b, q + 1))
end
local i = 1
for ki = 1, #KEYS do
  local k = KEYS[ki]
  local at, wm, nseg = tonumber(ARGV[i]), ARGV[i + 1], tonumber(ARGV[i + 2])
  i = i + 3
  local fields, codes, sentry, sstart, sstop = {}, {}, {}, {}, {}
  if wm ~= '' then codes[wm] = false; fields[1] = wm end
  for s = 1, nseg do
    local entry, start = ARGV[i], i + 2
    local stop = start + tonumber(ARGV[i + 1])
    sentry[s], sstart[s], sstop[s] = entry, start, stop
    local j = start
    while j < stop do
      local code = ARGV[j]
      local n = N[code]
      if not n then return redis.error_reply('windvane: unknown opcode ' .. tostring(code)) end
      local f = ARGV[j + 1]
      if codes[f] == nil then codes[f] = code; fields[#fields + 1] = f end
      j = j + 1 + n
    end
    i = stop
  end
  local stored, values, changed = {}, {}, {}
  if #fields > 0 then
    local raw = redis.call('HMGET', k, unpack(fields))
    for x = 1, #fields do
      local f = fields[x]
      stored[f] = raw[x]
      if codes[f] then values[f] = DEC[codes[f]](raw[x]) end
    end
  end
  local mark = wm ~= '' and stored[wm] or false
  -- A key's segments come in stream order (one shard's entries, in id order), so once
  -- one is past the watermark every later one is too.
  local passed = wm == ''
  local dirty = false
  for s = 1, nseg do
    local entry, j, stop = sentry[s], sstart[s], sstop[s]
    if passed or entry == '' or after(entry, mark) then
      if entry ~= '' then passed = true end
      while j < stop do
        local code, f = ARGV[j], ARGV[j + 1]
        local v, touched = APP[code](values[f], ARGV, j + 1)
        values[f] = v
        if touched then changed[f] = true; dirty = true end
        j = j + 1 + N[code]
      end
      if wm ~= '' and entry ~= '' then mark = entry end
    end
  end
  if dirty or (mark and mark ~= stored[wm]) then
    local flat = {}
    for x = 1, #fields do
      local f = fields[x]
      if changed[f] then
        flat[#flat + 1] = f
        flat[#flat + 1] = ENC[codes[f]](values[f])
      end
    end
    if wm ~= '' and mark and mark ~= stored[wm] then
      flat[#flat + 1] = wm
      flat[#flat + 1] = mark
    end
    redis.call('HSET', k, unpack(flat))
    if redis.call('PEXPIREAT', k, at, 'GT') == 0 and redis.call('PTTL', k) == -1 then
      redis.call('PEXPIREAT', k, at)
    end
  end
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
    parts = ["local N, DEC, APP, ENC = {}, {}, {}, {}"]
    for opcode in sorted(handlers):
        handler = handlers[opcode]
        parts.append(f"N[{opcode!r}] = {handler.arity}")
        parts.append(f"DEC[{opcode!r}] = function(s)\n{handler.decode.strip()}\nend")
        parts.append(f"APP[{opcode!r}] = function(v, a, i)\n{handler.apply.strip()}\nend")
        parts.append(f"ENC[{opcode!r}] = function(v)\n{handler.encode.strip()}\nend")
    parts.append(_DRIVER.strip())
    return "\n".join(parts) + "\n"


UPDATE_SCRIPT = build_update_script()
UPDATE_SCRIPT_SHA = hashlib.sha1(UPDATE_SCRIPT.encode()).hexdigest()
