// A bare aedes broker in a process of its own, every publish authorised at once: the ceiling
// bench:ingest compares Owlshift with, when the broker does not share the benchmark's process.
// Prints "port <n>" when listening.
import net from 'node:net'
import { Aedes } from 'aedes'

const broker = await Aedes.createBroker({ authorizePublish: (_c, _p, done) => done(null) })
const server = net.createServer(s => broker.handle(s))
server.listen(0, '127.0.0.1', () => console.log(`port ${(server.address() as net.AddressInfo).port}`))
process.on('SIGTERM', () => { server.close(); broker.close(() => process.exit(0)) })
