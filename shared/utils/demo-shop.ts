// The invented demo shop: Larkspur Tool & Pin, a made-up maker of carbide rods and pins.
// One place for it, so the server's seed and the simulator's default scenario agree.
// Names, part numbers and people are our own inventions.

export const demoShop = {
  company: 'Larkspur Tool & Pin (demo)',
  cell: { id: 'cell-a', name: 'Night cell A', timeZone: 'Europe/Berlin' },
  machines: [
    { id: 'cg-01', name: 'Heron', model: 'centerless, through-feed, 8 in wheel', jobPart: 'LTP-0630-R' },
    { id: 'cg-02', name: 'Wren', model: 'centerless, in-feed, 8 in wheel', jobPart: 'LTP-1200-P' },
    { id: 'cg-03', name: 'Kite', model: 'centerless, through-feed, 12 in wheel', jobPart: 'LTP-0318-B' },
    { id: 'cg-04', name: 'Finch', model: 'centerless, plunge, 12 in wheel', jobPart: 'LTP-2000-S' },
  ],
  jobs: [
    { partNumber: 'LTP-0630-R', description: 'Carbide rod blank, ground to size', material: 'carbide K40UF', method: 'through-feed', nominalMm: '6.300', upperTolNm: 2000, lowerTolNm: -2000, isoFit: null, roundnessLimitNm: 760, wheelSpec: 'D46 resin bond', partsPerPallet: 120, cycleTimeS: 18 },
    { partNumber: 'LTP-1200-P', description: 'Ejector pin shank', material: 'steel 1.2210, 60 HRC', method: 'in-feed', nominalMm: '12.000', upperTolNm: 0, lowerTolNm: -8000, isoFit: 'h5', roundnessLimitNm: 1500, wheelSpec: 'A80 vitrified', partsPerPallet: 80, cycleTimeS: 24 },
    { partNumber: 'LTP-0318-B', description: 'Micro-drill blank, 1/8 in', material: 'carbide K20', method: 'through-feed', nominalMm: '3.175', upperTolNm: 2000, lowerTolNm: -2000, isoFit: null, roundnessLimitNm: 760, wheelSpec: 'D64 resin bond', partsPerPallet: 200, cycleTimeS: 15 },
    { partNumber: 'LTP-2000-S', description: 'Step punch, shank diameter', material: 'HSS 1.3343', method: 'plunge', nominalMm: '20.000', upperTolNm: 4000, lowerTolNm: -4000, isoFit: null, roundnessLimitNm: 2000, wheelSpec: 'A100 vitrified', partsPerPallet: 60, cycleTimeS: 30 },
  ],
  // Demo sign-ins, one per role. The password is only for the demo shop. The phone numbers are in
  // the UK range kept for drama (07700 900xxx, never given to a subscriber — from memory); the demo
  // sends SMS and calls only to its local phone fake.
  users: [
    { email: 'ada@larkspur.example', name: 'Ada Lindqvist', role: 'admin', phone: '+447700900101' },
    { email: 'bram@larkspur.example', name: 'Bram Okonjo', role: 'engineer', phone: '+447700900102' },
    { email: 'cleo@larkspur.example', name: 'Cleo Marchetti', role: 'lead', phone: '+447700900103' },
    { email: 'dara@larkspur.example', name: 'Dara Nowak', role: 'operator', phone: '+447700900104' },
    { email: 'eli@larkspur.example', name: 'Eli Sørensen', role: 'viewer', phone: null },
  ],
  password: 'owlshift-demo',
} as const
