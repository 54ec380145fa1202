mod demo_scenario;
