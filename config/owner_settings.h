// OwnerSettings: the typed settings that the owner of a config block above
// config/ (the store, the uplink, the station runtime, a driver) read from
// its block while the whole config was checked (daemon/core/config_check.h),
// kept with the config so that the code that runs uses exactly what the
// check accepted and never reads the block a second time.
//
// One value per type: put<T>() by the owner's checker, get<T>() by its user.
// config/ knows none of these types (they live in the layers above); the
// type is checked at get<T>() (std::type_index), so a mix-up is an error,
// never a wrong value. Copies share the (immutable) values.
#pragma once

#include <map>
#include <memory>
#include <stdexcept>
#include <string>
#include <typeindex>
#include <typeinfo>

namespace tarn::config {

class OwnerSettings {
 public:
  template <class T>
  void put(T value) {
    slots_[std::type_index(typeid(T))] = std::make_shared<const T>(std::move(value));
  }
  template <class T>
  bool has() const {
    return slots_.count(std::type_index(typeid(T))) != 0;
  }
  // REQUIRES: put<T>() was called (the config went through the whole check);
  // throws std::logic_error otherwise.
  template <class T>
  const T& get() const {
    auto it = slots_.find(std::type_index(typeid(T)));
    if (it == slots_.end())
      throw std::logic_error(std::string("config settings not read by their owner: ") +
                             typeid(T).name() + " (the config did not go through the check)");
    return *static_cast<const T*>(it->second.get());
  }

 private:
  std::map<std::type_index, std::shared_ptr<const void>> slots_;
};

}  // namespace tarn::config
