-- Nothing answers at 0x33: the run stops with the address and this line
-- (exit code 3).
local ghost = bus.device(0x33)
log("reading a register of a device that is not fitted")
ghost:get(0x00)
