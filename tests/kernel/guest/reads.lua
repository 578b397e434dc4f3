-- The guest benchmark: Read Byte transactions, counted by param `n`.
local n = param("n", 10000)
local d = bus.device(0x31)
for _ = 1, n do
  d:get(0x10)
end
