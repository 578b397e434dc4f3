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
