-- Write a calibration block to the configuration EEPROM across a page
-- boundary, page by page with ACK polling, then verify it.
--   buscue run scripts/eeprom_calibration.lua --set start=0x0130 --set length=80

local EEPROM = 0x50
local PAGE = 32                 -- bytes per page (see adapters/greenhouse.toml)
local start = param("start", 0x0010)
local length = param("length", 48)

-- The block: a recognisable pattern with a sum byte at the end.
local block, sum = {}, 0
for i = 1, length - 1 do
  block[i] = (0x40 + i * 7) % 256
  sum = (sum + block[i]) % 256
end
block[length] = (256 - sum) % 256

step("write page by page")
local offset = 0
while offset < length do
  local addr = start + offset
  local room = PAGE - (addr % PAGE)            -- bytes left in this page
  local n = math.min(room, length - offset)
  local chunk = { addr >> 8, addr & 0xFF }
  for i = 1, n do chunk[2 + i] = block[offset + i] end
  bus.write(EEPROM, chunk)
  local ms = bus.wait_ack(EEPROM, { timeout_ms = 10 })   -- write cycle
  log(string.format("wrote %d bytes at 0x%04X, write cycle %.2f ms", n, addr, ms))
  offset = offset + n
end

step("verify")
local back = bus.write_read(EEPROM, { start >> 8, start & 0xFF }, length)
check_eq(back, block, string.format("EEPROM 0x%04X..0x%04X", start, start + length - 1))
local total = 0
for _, b in ipairs(back) do total = (total + b) % 256 end
check_eq(total, 0, "block checksum")
log("calibration block verified")

step("the node's calibration record, by its map")
-- The record's layout is scripts/maps/config_eeprom.lua; each value is one
-- write (raw), then the write cycle; frames and the dump show the values
-- in units (LIGHT_GAIN is stored as an exponent: raw 32 is 2x).
local cal = bus.device(EEPROM, { pointer = 16, map = require("maps.config_eeprom") })
local record = { { "CAL_MAGIC", 0xCA11 }, { "TEMP_TRIM", 0xFFCE }, { "HUM_GAIN", 0x8000 }, { "LIGHT_GAIN", 32 } }
for _, r in ipairs(record) do
  cal:set(r[1], r[2])
  bus.wait_ack(EEPROM, { timeout_ms = 10 })
end
check_eq(cal:read("CAL_MAGIC"), "v1", "record format")
local trim, unit = cal:read("TEMP_TRIM")
check_eq(string.format("%.2f %s", trim, unit), "-0.50 degC", "temperature trim: 0xFFCE = -50 x 0.01")
for line in cal:dump():gmatch("[^\n]+") do log(line) end
