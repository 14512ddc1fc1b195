"""What the dashboard pages show: the overview's figures (``figures``), the overview,
campaign list and live feed (``overview``), the shot table and its CSV (``table``), the
shot page (``shot_page``) and the settings form (``settings_form``)."""
