-- Batching independent transactions: configure the canopy light sensor
-- and take a burst of readings in one go. On a serial adapter the whole
-- block travels as one request; results arrive when the block ends.
--   buscue run scripts/light_batch.lua --set readings=8

local LIGHT = 0x2B          -- little-endian 16-bit registers
local n = param("readings", 4)

step("configure and read in one batch")
local r = bus.batch(function(b)
  b:write(LIGHT, { 0x01, 0x03, 0x00 })          -- CONTROL = 0x0003
  b:write_read(LIGHT, 0x01, 2)                  -- read CONTROL back
  for _ = 1, n do
    b:write_read(LIGHT, 0x02, 2)                -- VISIBLE
  end
end)
check_eq(r[1], true, "CONTROL write")
check_eq(r[2], { 0x03, 0x00 }, "CONTROL read back")
check_eq(#r, 2 + n, "one result per queued transaction")
for i = 1, n do
  local visible = r[2 + i][1] | (r[2 + i][2] << 8)
  check_range(visible, 1000, 40000, "visible light (counts)")
end

step("an identity check per device, batched")
local ids = bus.batch(function(b)
  b:write_read(LIGHT, 0x00, 2)
  b:write_read(0x11, 0x00, 1)                   -- the vent controller NACKs now and then:
end)                                            -- retried on its own after the batch
check_eq(ids[1], { 0x5A, 0x1C }, "light sensor ID")
check_eq(ids[2], { 0xA7 }, "vent controller ID")
log(string.format("%d readings batched", n))
