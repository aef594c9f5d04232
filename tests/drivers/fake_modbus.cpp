#include "fake_modbus.h"

#include <cstring>

#include "drivers/protocol/crc.h"

namespace tarn::test {

FakeModbusBus::FakeModbusBus(const std::string& link) {
  fake_ = std::make_unique<FakeInstrument>(link, [this](Bytes& in) { return answer(in); });
}

void FakeModbusBus::set_fault(Fault f, int times) {
  std::lock_guard<std::mutex> g(mu_);
  fault_ = f;
  fault_left_ = times;
}

void FakeModbusBus::put_f32(std::map<std::uint16_t, std::uint16_t>& regs, std::uint16_t at, float v,
                            bool high_first) {
  std::uint32_t u;
  std::memcpy(&u, &v, 4);
  regs[at] = std::uint16_t(high_first ? u >> 16 : u & 0xFFFF);
  regs[std::uint16_t(at + 1)] = std::uint16_t(high_first ? u & 0xFFFF : u >> 16);
}

static void append_crc(Bytes& f) {
  std::uint16_t c = protocol::crc16_modbus(std::span<const std::uint8_t>(f));
  f.push_back(std::uint8_t(c & 0xFF));
  f.push_back(std::uint8_t(c >> 8));
}

Bytes FakeModbusBus::answer(Bytes& in) {
  Bytes out;
  while (in.size() >= 8) {
    Bytes req(in.begin(), in.begin() + 8);
    std::uint16_t crc = protocol::crc16_modbus(std::span<const std::uint8_t>(req.data(), 6));
    if (req[6] != (crc & 0xFF) || req[7] != (crc >> 8)) {
      in.erase(in.begin());  // resynchronise byte by byte
      continue;
    }
    in.erase(in.begin(), in.begin() + 8);
    ++requests_;
    auto it = units_.find(req[0]);
    if (it == units_.end() || it->second.mute) continue;
    FakeModbusUnit& u = it->second;
    const std::uint8_t fn = req[1];
    const std::uint16_t start = std::uint16_t(req[2] << 8 | req[3]);
    const std::uint16_t count = std::uint16_t(req[4] << 8 | req[5]);
    Bytes rep{req[0], fn};
    auto& regs = fn == 4 ? u.input : u.holding;
    bool ok = (fn == 3 || fn == 4) && count >= 1 && count <= 125;
    for (std::uint32_t a = start; ok && a < std::uint32_t(start) + count; ++a)
      ok = regs.count(std::uint16_t(a)) > 0;
    if (!ok) {
      rep[1] = std::uint8_t(fn | 0x80);
      rep.push_back(fn == 3 || fn == 4 ? 0x02 : 0x01);  // ILLEGAL DATA ADDRESS / FUNCTION
    } else {
      rep.push_back(std::uint8_t(2 * count));
      for (std::uint32_t a = start; a < std::uint32_t(start) + count; ++a) {
        rep.push_back(std::uint8_t(regs[std::uint16_t(a)] >> 8));
        rep.push_back(std::uint8_t(regs[std::uint16_t(a)] & 0xFF));
      }
    }
    append_crc(rep);
    Fault f;
    {
      std::lock_guard<std::mutex> g(mu_);
      f = fault_left_ > 0 ? fault_ : Fault::none;
      if (fault_left_ > 0) --fault_left_;
    }
    switch (f) {
      case Fault::none:
        break;
      case Fault::bad_crc:
        rep.back() ^= 0x5A;
        break;
      case Fault::truncated:
        rep.resize(rep.size() - 3);
        break;
      case Fault::garbage:
        rep = Bytes{0x13, 0x37, 0xFF, 0x00, 0xAA, 0x55, 0x12};
        break;
      case Fault::wrong_unit:
        rep[0] = std::uint8_t(rep[0] + 1);
        rep.resize(rep.size() - 2);
        append_crc(rep);
        break;
      case Fault::late: {
        FakeInstrument* p = fake_.get();
        int ms = late_ms_;
        std::thread([p, rep, ms] {
          std::this_thread::sleep_for(std::chrono::milliseconds(ms));
          p->send(rep);
        }).detach();
        rep.clear();
        break;
      }
    }
    out.insert(out.end(), rep.begin(), rep.end());
  }
  return out;
}

}  // namespace tarn::test
