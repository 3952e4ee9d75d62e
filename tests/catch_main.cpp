// Catch2 (v2) test runner entry point.
#define CATCH_CONFIG_MAIN
#include <catch2/catch.hpp>
