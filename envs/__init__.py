"""Environment layer: gymnasium envs built from config, wrappers chosen by config."""

from seedsweep.envs.build import EnvSpec, make_eval_env, make_train_envs, parse_env_config

__all__ = ["EnvSpec", "make_eval_env", "make_train_envs", "parse_env_config"]
