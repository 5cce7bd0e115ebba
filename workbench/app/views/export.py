import streamlit as st

st.title("export")
