-- Drive the vent controller, which sits on a long cable and NACKs its
-- address now and then. A retry policy rides through it; every retry is
-- a frame in the log.

bus.retry({ attempts = param("attempts", 6), delay_ms = 2, backoff = 2 })
local vent = bus.device(0x11)

step("identify")
check_eq(vent:get(0x00), 0xA7, "vent controller ID")

step("sweep")
for pos = 0, 100, 25 do
  vent:set(0x01, pos)
  check_eq(vent:get(0x01), pos, "vent position read back")
end

local s = bus.stats()
log(string.format("%d transactions, %d retries, %d NACKs", s.transactions, s.retries, s.nacks))
