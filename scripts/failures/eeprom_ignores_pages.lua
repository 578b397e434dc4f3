-- A common mistake: one 48-byte write that crosses a page boundary. The
-- EEPROM wraps inside the page, so the verify step fails (exit code 1).
local EEPROM, start, length = 0x50, 0x0010, 48
local data = { start >> 8, start & 0xFF }
local block = {}
for i = 1, length do block[i] = i; data[2 + i] = i end
bus.write(EEPROM, data)
bus.wait_ack(EEPROM, { timeout_ms = 10 })
check_eq(bus.write_read(EEPROM, { start >> 8, start & 0xFF }, length), block, "block read back")
